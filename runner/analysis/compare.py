"""A candidate agent against baselines: the comparison document and the seed plan.

For each baseline: per env, the IQM of raw scores with a bootstrap interval, the seed count
and P(candidate > baseline); over envs, the IQM difference of normalised scores (candidate
- baseline) and the probability of improvement, each with a stratified bootstrap interval;
and a verdict (:data:`VERDICT_RULE`). The seed plan estimates, per env, the seeds per agent a
later comparison needs (:mod:`.power`).
"""

from __future__ import annotations

import argparse
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
from seedsweep.configs.checks import ConfigError
from seedsweep.runner.analysis import (
    decision,
    intervals,
    multiple,
    permutation,
    power,
    scores,
    selection,
    stats,
    tuning,
)
from seedsweep.runner.analysis.permutation import PermutationResult
from seedsweep.runner.analysis.runs import Problem, Sweep, load_sweep
from seedsweep.runner.analysis.stats import keyed_rng

COMPARE_TOOLS = ("stratified permutation test (labels permuted within each env) of the "
                 "stratified P(candidate > baseline); Holm's adjustment over the baselines; "
                 "stratified bootstrap interval of the IQM difference")


def iqm_difference(
    x_strata: stats.Strata, y_strata: stats.Strata, resamples: int, confidence: float,
    rng: np.random.Generator,
) -> stats.Interval:
    """IQM(x) - IQM(y) (IQM pooled over envs) with a stratified bootstrap percentile interval:
    each agent's runs are resampled within each env, independently of the other agent's."""
    iv = intervals.iqm_difference_interval(list(x_strata), list(y_strata), resamples,
                                           confidence, rng, "percentile")
    return stats.Interval(iv.point, iv.low, iv.high)


def _pair(candidate: str, baseline: str) -> tuple[str, str, bool]:
    """Pairs are resampled in name order, so A-vs-B and B-vs-A mirror each other exactly
    (and P matches the report's table, which uses the same order and generator)."""
    first, second = sorted((candidate, baseline))
    return first, second, first != candidate


def pair_improvement(cand: str, base: str, cand_strata: stats.Strata,
                     base_strata: stats.Strata, resamples: int, confidence: float, seed: int,
                     purpose: str = "improvement", *extra: str) -> stats.Interval:
    """P(candidate > baseline) with the report's generator for this pair."""
    first, second, flipped = _pair(cand, base)
    x, y = (base_strata, cand_strata) if flipped else (cand_strata, base_strata)
    iv = stats.probability_of_improvement(x, y, resamples, confidence,
                                          keyed_rng(seed, purpose, first, second, *extra))
    return stats.Interval(1.0 - iv.point, 1.0 - iv.high, 1.0 - iv.low) if flipped else iv


def pair_test(cand: str, base: str, cand_strata: stats.Strata, base_strata: stats.Strata,
              seed: int) -> PermutationResult:
    """The verdict's permutation test for one pair (its random relabellings, when the
    design is too large to count exactly, come from a generator keyed by the pair)."""
    first, second, flipped = _pair(cand, base)
    x, y = (base_strata, cand_strata) if flipped else (cand_strata, base_strata)
    test = permutation.stratified_permutation_test(
        x, y, rng=keyed_rng(seed, "permutation", first, second))
    if flipped:  # the two-sided p-value is symmetric; the statistic mirrors
        test = PermutationResult(1.0 - test.statistic, test.p_value, test.method,
                                 test.permutations, test.smallest_p)
    return test


def pair_difference(cand: str, base: str, cand_strata: stats.Strata,
                    base_strata: stats.Strata, resamples: int, confidence: float,
                    seed: int, method: str = "bca") -> intervals.EffectInterval:
    """IQM(candidate) - IQM(baseline) with the verdict's interval, keyed by the pair."""
    first, second, flipped = _pair(cand, base)
    x, y = (base_strata, cand_strata) if flipped else (cand_strata, base_strata)
    iv = intervals.iqm_difference_interval(
        x, y, resamples, confidence, keyed_rng(seed, "iqm_difference", first, second), method)
    if not flipped:
        return iv
    return intervals.EffectInterval(-iv.point, -iv.high, -iv.low, iv.method, iv.confidence,
                                    iv.zero_width)


def fmt_interval(iv: stats.Interval | dict[str, float], threshold: float) -> str:
    """``[low, high]`` with 3 decimals, more where rounding would hide which side of
    ``threshold`` an endpoint is on (so the stated reason always reads true)."""
    low, high = (iv["low"], iv["high"]) if isinstance(iv, dict) else (iv.low, iv.high)

    def one(v: float) -> str:
        for digits in (3, 4, 5, 6, 8, 12):
            text = f"{v:.{digits}f}"
            if (float(text) == threshold) == (v == threshold):
                return text
        return repr(v)

    return f"[{one(low)}, {one(high)}]"


def _seed_counts(strata: stats.Strata) -> str:
    counts = sorted({len(s) for s in strata})
    return str(counts[0]) if len(counts) == 1 else f"{counts[0]}-{counts[-1]}"


def _verdict(test: PermutationResult, p_used: float, family: int, diff: intervals.EffectInterval,
             alpha: float, envs: int) -> tuple[str, str, int]:
    """(verdict, reason, seeds a decisive design needs) under :data:`decision.VERDICT_RULE`.

    In a family of ``family`` baselines Holm's first step multiplies the smallest p by the
    family size, so a design whose smallest possible p exceeds alpha / family can never give
    a verdict; the reason says so and names the smallest design that can."""
    code = int(decision.verdict_codes(np.array(p_used), np.array(test.statistic),
                                      np.array(diff.low), np.array(diff.high), alpha))
    level = alpha / family
    decisive = permutation.seeds_to_reach(level, envs)
    p_text = f"p = {p_used:.3g}" + (" (Holm-adjusted)" if family > 1 else "")
    d_text = (f"the IQM-difference interval {fmt_interval(diff.as_dict(), 0.0)} "
              f"({diff.confidence:.0%} {diff.method})")
    if code == 1:
        return "better", (f"{p_text} <= {alpha} with P(candidate > baseline) = "
                          f"{test.statistic:.3f} > 0.5, and {d_text} lies above 0"), decisive
    if code == -1:
        return "worse", (f"{p_text} <= {alpha} with P(candidate > baseline) = "
                         f"{test.statistic:.3f} < 0.5, and {d_text} lies below 0"), decisive
    if test.smallest_p > level:
        return "cannot decide", (
            f"this design cannot decide: with these seed counts the smallest possible p is "
            f"{test.smallest_p:.3g}" + (f" (x {family} for Holm's adjustment)" if family > 1
                                        else "")
            + f", never <= {alpha}; the smallest decisive design has {decisive} seeds per "
            "agent per env"), decisive
    if p_used > alpha:
        same = (" (every run scored the same: no spread, which is not proof of equality)"
                if diff.zero_width else "")
        return "insufficient evidence", (f"{p_text} > {alpha}: the runs do not show a "
                                         f"difference at this level{same}"), decisive
    return "insufficient evidence", (f"{p_text} <= {alpha} but {d_text} does not lie on the "
                                     "same side of 0 as the ranks: the two measures "
                                     "disagree"), decisive


def compare_all(cand: str, baselines: Sequence[str], envs: Sequence[str],
                norm: dict[str, list[np.ndarray]], raw: dict[str, list[np.ndarray]],
                resamples: int, confidence: float, seed: int, alpha: float = 0.05,
                method: str = "bca") -> list[dict[str, Any]]:
    """compare.json's entries, one per baseline. The baselines are one family: their
    permutation p-values are Holm-adjusted together (Holm 1979). ``norm``/``raw``: agent ->
    per-env arrays of normalised/raw run scores, in the order of ``envs``."""
    tests = {b: pair_test(cand, b, norm[cand], norm[b], seed) for b in baselines}
    adjusted = multiple.holm([tests[b].p_value for b in baselines], alpha).adjusted
    family = len(baselines)
    out = []
    for b, p_used in zip(baselines, adjusted, strict=True):
        out.append(_compare_one(cand, b, envs, norm, raw, resamples, confidence, seed, alpha,
                                method, tests[b], float(p_used), family))
    return out


def compare_pair(cand: str, base: str, envs: Sequence[str], norm: dict[str, list[np.ndarray]],
                 raw: dict[str, list[np.ndarray]], resamples: int, confidence: float,
                 seed: int, alpha: float = 0.05, method: str = "bca") -> dict[str, Any]:
    """The entry for one baseline compared alone (no adjustment)."""
    return compare_all(cand, [base], envs, norm, raw, resamples, confidence, seed, alpha,
                       method)[0]


def _compare_one(cand: str, base: str, envs: Sequence[str], norm: dict, raw: dict,
                 resamples: int, confidence: float, seed: int, alpha: float, method: str,
                 test: PermutationResult, p_used: float, family: int) -> dict[str, Any]:
    improvement = pair_improvement(cand, base, norm[cand], norm[base], resamples, confidence,
                                   seed)
    difference = pair_difference(cand, base, norm[cand], norm[base], resamples, 1.0 - alpha,
                                 seed, method)
    word, reason, decisive = _verdict(test, p_used, family, difference, alpha, len(envs))
    per_env = {}
    for j, env in enumerate(envs):
        cells = {}
        for role, agent in (("candidate", cand), ("baseline", base)):
            values = raw[agent][j]
            iv = stats.bootstrap_interval(values, "iqm", resamples, confidence,
                                          keyed_rng(seed, "per_env", agent, env))
            cells[role] = {**iv.as_dict(), "n_seeds": int(values.size)}
        # one env: the per-env P is the same quantity as the aggregate one, computed once
        env_p = improvement if len(envs) == 1 else pair_improvement(
            cand, base, [norm[cand][j]], [norm[base][j]], resamples, confidence, seed,
            "improvement", env)
        per_env[env] = {"raw_iqm": cells, "probability_of_improvement": env_p.as_dict()}
    aggregate = {a: stats.aggregate_intervals(norm[a], resamples, confidence,
                                              keyed_rng(seed, "aggregate", a))["iqm"].as_dict()
                 for a in (cand, base)}
    adjustment = (f"Holm over {family} baselines" if family > 1 else "none (one baseline)")
    evidence = (f"alpha {alpha}; seeds per env {_seed_counts(norm[cand])} vs "
                f"{_seed_counts(norm[base])} on {len(envs)} env{'s' if len(envs) > 1 else ''}; "
                f"permutation p = {test.p_value:.3g}"
                + (f", Holm-adjusted {p_used:.3g}" if family > 1 else "")
                + f"; IQM difference {difference.point:+.3f} "
                f"{fmt_interval(difference.as_dict(), 0.0)} ({difference.confidence:.0%} "
                f"{difference.method})")
    return {
        "baseline": base,
        "verdict": word,
        "reason": reason,
        "evidence": evidence,
        "alpha": alpha,
        "test": test.as_dict(),
        "p_adjusted": p_used,
        "adjustment": adjustment,
        "decisive_seeds_per_env": decisive,
        "probability_of_improvement": improvement.as_dict(),
        "iqm_difference": difference.as_dict(),
        "candidate_iqm": aggregate[cand],
        "baseline_iqm": aggregate[base],
        "per_env": per_env,
    }


@dataclass
class Loaded:
    """The cells of a comparison after the report's checks."""

    sweep: Sweep
    candidate: str
    baselines: list[str]
    envs: list[str]
    by_cell: dict
    env_cfgs: dict
    eval_settings: dict
    problems: list[Problem]


def load_cells(opts: argparse.Namespace, allow_few: bool, pilot: bool = False) -> Loaded:
    """Load and check the sweep for a candidate and its baselines (refusals as ConfigError).
    ``pilot``: the cells are pilot runs for plan-seeds, which always needs 2 per cell."""
    sweep = load_sweep(Path(opts.sweep))
    tuning.check_evaluation_runs(sweep.runs, Path(opts.sweep))
    cand, baselines = selection.select_pair_agents(sweep, opts.candidate, opts.baseline)
    agents = [cand, *baselines]
    envs = selection.select_envs(sweep, agents, opts.envs)
    by_cell = selection.group_runs(sweep.runs, agents, envs)
    selection.check_cells(by_cell, agents, envs, sweep.problems, allow_few or pilot)
    for (agent, env), runs in by_cell.items():
        if pilot and len(runs) < 2:
            raise ConfigError("runs", f"{agent} has {len(runs)} complete run on {env}; the "
                              "power analysis needs at least 2 pilot runs per agent and env")
    env_cfgs, eval_settings = selection.check_settings(by_cell, agents, envs)
    names = {a.split("[")[0] for a in agents}
    problems = [p for p in sweep.problems if p.agent in names and p.env in envs]
    problems += selection.missing_runs(sweep, agents, envs, by_cell)
    return Loaded(sweep, cand, baselines, envs, by_cell, env_cfgs, eval_settings, problems)


def request_of(opts: argparse.Namespace) -> dict[str, Any]:
    """What was asked, enough to recompute the comparison later (see :func:`for_report`)."""
    return {"candidate": opts.candidate, "baseline": opts.baseline, "envs": opts.envs,
            "score": opts.score, "last_k": opts.last_k, "confidence": opts.confidence,
            "resamples": opts.resamples, "seed": opts.seed, "allow_few": opts.allow_few,
            "random_episodes": opts.random_episodes, "alpha": opts.alpha,
            "interval": opts.interval}


def compute_comparison(opts: argparse.Namespace) -> dict[str, Any]:
    """The compare.json document; raises ConfigError on bad input and MissingRandomScore
    when an env's random score must be measured first (as the report does); writes nothing."""
    cells = load_cells(opts, opts.allow_few)
    agents = [cells.candidate, *cells.baselines]
    compared = [r for a in agents for e in cells.envs for r in cells.by_cell[(a, e)]]
    raw_score = {r.run_id: scores.score_run(r, opts.score, opts.last_k) for r in compared}
    references, excluded = _references(cells, opts)
    cells.problems += excluded
    raw = {a: [np.array([raw_score[r.run_id] for r in cells.by_cell[(a, e)]])
               for e in cells.envs] for a in agents}
    norm = {a: [np.asarray(references[e].normalise(v), dtype=float)
                for e, v in zip(cells.envs, raw[a], strict=True)] for a in agents}
    comparisons = compare_all(cells.candidate, cells.baselines, cells.envs, norm, raw,
                              opts.resamples, opts.confidence, opts.seed, opts.alpha,
                              opts.interval)
    tuned = {a: tuning.tuning_of([r for e in cells.envs for r in cells.by_cell[(a, e)]])
             for a in agents}
    floor = {r.label for r in cells.sweep.runs if r.is_floor}
    return {
        "sweep": cells.sweep.name,
        "candidate": cells.candidate,
        "baselines": cells.baselines,
        "envs": cells.envs,
        "verdict_rule": decision.VERDICT_RULE,
        "alpha": opts.alpha,
        "methods": COMPARE_TOOLS,
        "comparisons": comparisons,
        "tuning": tuned,
        "tuning_note": tuning.tuning_note(cells.candidate, tuned, floor),
        "references": {e: references[e].as_dict() for e in cells.envs},
        "evaluation": cells.eval_settings,
        "bootstrap": {"resamples": opts.resamples, "confidence": opts.confidence,
                      "seed": opts.seed, "method": "stratified (strata = envs), percentile; "
                      f"the IQM difference: {opts.interval} at level 1 - alpha"},
        "score": {"method": opts.score,
                  "last_k": opts.last_k if opts.score == "last-k" else None,
                  "normalisation": "(score - random) / (reference - random)"},
        "method_reference": "Agarwal et al. 2021, Deep Reinforcement Learning at the Edge of "
                            "the Statistical Precipice (NeurIPS)",
        "excluded_runs": [vars(p) for p in cells.problems],
        "request": request_of(opts),
    }


def parse_differences(items: Sequence[str] | None, envs: Sequence[str],
                      sweep: Sweep) -> dict[str, float]:
    """--difference values per env: ``D`` for every env, ``ENV=D`` for one (env key,
    gymnasium id or env config name). Required: no default from the pilots' own difference
    (planning for the observed difference is the post-hoc power fallacy)."""
    if not items:
        raise ConfigError("--difference", "required: the smallest difference in score that "
                          "matters to you (raw score units, ENV=D per env, or with --units "
                          "normalised); planning for the pilots' own difference would plan "
                          "too few seeds whenever the pilots were lucky")
    aliases = {e: e for e in envs}
    for r in sweep.runs:
        if r.env_key in envs:
            aliases.setdefault(r.env_config, r.env_key)
            if r.env_id == r.env_key:
                aliases.setdefault(r.env_id, r.env_key)
    out: dict[str, float] = {}
    for item in items:
        name, sep, value = item.rpartition("=")
        try:
            d = float(value)
        except ValueError:
            raise ConfigError("--difference", f"expected a number or ENV=NUMBER, got "
                              f"{item!r}") from None
        if not np.isfinite(d) or d == 0:
            raise ConfigError("--difference", f"must be finite and non-zero (got {item!r})")
        if not sep:
            out.update(dict.fromkeys(envs, d))
        elif name in aliases:
            out[aliases[name]] = d
        else:
            raise ConfigError("--difference", f"unknown env {name!r} (compared: "
                              f"{', '.join(envs)})")
    missing = [e for e in envs if e not in out]
    if missing:
        raise ConfigError("--difference", f"no difference for {missing[0]} (give D for every "
                          f"env, or ENV=D for each of {', '.join(envs)})")
    return out


def plan_seeds(opts: argparse.Namespace) -> dict[str, Any]:
    """Seeds per agent per env for the verdict's own test (the stratified permutation test,
    Holm-planned at alpha / number of baselines) to detect the stated difference with the
    target power, from pilot runs; ConfigError on bad input; writes nothing."""
    cells = load_cells(opts, allow_few=False, pilot=True)
    differences = parse_differences(opts.difference, cells.envs, cells.sweep)
    scale = dict.fromkeys(cells.envs, 1.0)
    if opts.units == "normalised":
        refs, _ = _references(cells, opts)
        scale = {e: refs[e].reference - refs[e].random for e in cells.envs}
    raw_d = {e: differences[e] * scale[e] for e in cells.envs}
    level = opts.alpha / len(cells.baselines)
    plans = []
    for base in cells.baselines:
        xs = [np.array([scores.score_run(r, opts.score, opts.last_k)
                        for r in cells.by_cell[(cells.candidate, e)]]) for e in cells.envs]
        ys = [np.array([scores.score_run(r, opts.score, opts.last_k)
                        for r in cells.by_cell[(base, e)]]) for e in cells.envs]
        for e, x, y in zip(cells.envs, xs, ys, strict=True):
            if np.ptp(x) == 0 and np.ptp(y) == 0:
                raise ConfigError("runs", f"{e}: every pilot run of {cells.candidate} and "
                                  f"{base} has the same score; power needs spread in the "
                                  "scores")
        rng = keyed_rng(opts.seed, "plan_seeds", cells.candidate, base)
        plan = power.plan_seeds(xs, ys, [raw_d[e] for e in cells.envs], opts.power, level, rng,
                                reps=opts.resamples, max_seeds=opts.max_seeds)
        plans.append({
            "baseline": base,
            "pilot_seeds": {e: [int(x.size), int(y.size)]
                            for e, x, y in zip(cells.envs, xs, ys, strict=True)},
            "pilot_sd": dict(zip(cells.envs, plan.sd, strict=True)),
            "sd_upper_bound": dict(zip(cells.envs, plan.sd_high, strict=True)),
            "difference_raw": raw_d,
            "seeds_per_agent": plan.expected.seeds, "seeds_label": plan.expected.label,
            "power_at_seeds": plan.expected.power,
            "seeds_at_pilot_sd": plan.at_pilot_sd.label,
            "seeds_if_sd_high": plan.if_sd_high.label,
            "model": plan.model,
            "power_curve": {str(n): v for n, v in plan.expected.curve.items()},
        })
    return {
        "sweep": cells.sweep.name, "candidate": cells.candidate, "baselines": cells.baselines,
        "envs": cells.envs, "power": opts.power, "alpha": opts.alpha, "planned_level": level,
        "units": opts.units, "difference": differences, "max_seeds": opts.max_seeds,
        "reps": opts.resamples, "seed": opts.seed, "score": opts.score,
        "sd_level": 0.8,
        "test": "the verdict's test: stratified permutation test of P(candidate > baseline), "
                "two-sided, at alpha / number of baselines (Holm's first step)",
        "method": "power by simulation of that test: pilots centred per agent and env, pooled "
                  "unbiased SD (ddof=1), normal runs (residual resampling from 10 pilots per "
                  "cell), the candidate shifted by the stated difference; the plan averages "
                  "power over the SDs the pilots allow (assurance, O'Hagan, Stevens and "
                  "Campbell 2005)",
        "plans": plans,
        "excluded_runs": [vars(p) for p in cells.problems],
    }


def _references(cells: Loaded, opts: argparse.Namespace
                ) -> tuple[dict[str, scores.Reference], list[Problem]]:
    """Random and reference scores per env, and the random runs left out (and why)."""
    targets = {e: scores.reference_score(cells.env_cfgs[e]) for e in cells.envs}
    out, excluded = {}, []
    for env in cells.envs:
        randoms, left_out = selection.matching_random_runs(
            cells.sweep.runs, env, cells.env_cfgs[env], cells.eval_settings[env])
        excluded += left_out
        out[env] = selection.make_reference(Path(opts.sweep).parent, cells.env_cfgs[env],
                                            cells.eval_settings[env], targets[env], randoms,
                                            opts)
    return out, excluded
