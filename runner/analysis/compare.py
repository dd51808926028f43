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
from seedsweep.runner.analysis import power, scores, selection, stats, tuning
from seedsweep.runner.analysis.runs import Problem, Sweep, load_sweep
from seedsweep.runner.analysis.stats import keyed_rng

VERDICT_RULE = (
    "better: the interval of P(candidate > baseline) lies entirely above 0.5 (low > 0.5) AND "
    "the interval of the IQM difference (candidate - baseline, normalised scores) lies "
    "entirely above 0 (low > 0); worse: P interval entirely below 0.5 (high < 0.5) AND "
    "IQM-difference interval entirely below 0 (high < 0); otherwise insufficient evidence. "
    "An interval with an endpoint equal to 0.5 (or 0) includes it."
)


COMPARE_FILE = "compare.json"


def iqm_difference(
    x_strata: stats.Strata, y_strata: stats.Strata, resamples: int, confidence: float,
    rng: np.random.Generator,
) -> stats.Interval:
    """IQM(x) - IQM(y) (IQM pooled over envs) with a stratified bootstrap percentile interval:
    each agent's runs are resampled within each env, independently of the other agent's."""
    xs, ys = list(x_strata), list(y_strata)
    if len(xs) != len(ys):
        raise ValueError("X and Y need the same envs")
    bx = stats.interquartile_mean(np.concatenate(stats.stratified_resample(xs, resamples, rng),
                                                 axis=1), axis=1)
    by = stats.interquartile_mean(np.concatenate(stats.stratified_resample(ys, resamples, rng),
                                                 axis=1), axis=1)
    point = float(stats.interquartile_mean(np.concatenate([np.ravel(a) for a in xs]))
                  - stats.interquartile_mean(np.concatenate([np.ravel(a) for a in ys])))
    low, high = stats.percentile_interval(bx - by, confidence)
    return stats.Interval(point, float(low), float(high))


def _pair(candidate: str, baseline: str) -> tuple[str, str, bool]:
    """Pairs are resampled in name order, so A-vs-B and B-vs-A mirror each other exactly
    (and P matches the report's table, which uses the same order and generator)."""
    first, second = sorted((candidate, baseline))
    return first, second, first != candidate


def _mirror(iv: stats.Interval, centre: float) -> stats.Interval:
    return stats.Interval(2 * centre - iv.point, 2 * centre - iv.high, 2 * centre - iv.low)


def pair_improvement(cand: str, base: str, cand_strata: stats.Strata,
                     base_strata: stats.Strata, resamples: int, confidence: float, seed: int,
                     purpose: str = "improvement", *extra: str) -> stats.Interval:
    """P(candidate > baseline) with the report's generator for this pair."""
    first, second, flipped = _pair(cand, base)
    x, y = (base_strata, cand_strata) if flipped else (cand_strata, base_strata)
    iv = stats.probability_of_improvement(x, y, resamples, confidence,
                                          keyed_rng(seed, purpose, first, second, *extra))
    return stats.Interval(1.0 - iv.point, 1.0 - iv.high, 1.0 - iv.low) if flipped else iv


def pair_difference(cand: str, base: str, cand_strata: stats.Strata,
                    base_strata: stats.Strata, resamples: int, confidence: float,
                    seed: int) -> stats.Interval:
    first, second, flipped = _pair(cand, base)
    x, y = (base_strata, cand_strata) if flipped else (cand_strata, base_strata)
    iv = iqm_difference(x, y, resamples, confidence,
                        keyed_rng(seed, "iqm_difference", first, second))
    return _mirror(iv, 0.0) if flipped else iv


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


def verdict(improvement: stats.Interval, difference: stats.Interval) -> tuple[str, str]:
    """(verdict, reason) under :data:`VERDICT_RULE`."""
    p_text = f"the probability-of-improvement interval {fmt_interval(improvement, 0.5)}"
    d_text = f"the IQM-difference interval {fmt_interval(difference, 0.0)}"
    p_above, p_below = improvement.low > 0.5, improvement.high < 0.5
    d_above, d_below = difference.low > 0.0, difference.high < 0.0
    if p_above and d_above:
        return "better", f"{p_text} lies above 0.5 and {d_text} lies above 0"
    if p_below and d_below:
        return "worse", f"{p_text} lies below 0.5 and {d_text} lies below 0"
    reasons = []
    if not (p_above or p_below):
        reasons.append(f"{p_text} includes 0.5")
    if not (d_above or d_below):
        reasons.append(f"{d_text} includes 0")
    if reasons:
        return "insufficient evidence", " and ".join(reasons) + (
            "; more seeds would narrow the intervals (see seedsweep plan-seeds)")
    p_side = "above 0.5" if p_above else "below 0.5"
    d_side = "above 0" if d_above else "below 0"
    return "insufficient evidence", (f"{p_text} lies {p_side} but {d_text} lies {d_side}: the "
                                     "two measures disagree")


def compare_pair(cand: str, base: str, envs: Sequence[str], norm: dict[str, list[np.ndarray]],
                 raw: dict[str, list[np.ndarray]], resamples: int, confidence: float,
                 seed: int) -> dict[str, Any]:
    """Everything compare.json says about one baseline. ``norm``/``raw``: agent -> per-env
    arrays of normalised/raw run scores, in the order of ``envs``."""
    improvement = pair_improvement(cand, base, norm[cand], norm[base], resamples, confidence,
                                   seed)
    difference = pair_difference(cand, base, norm[cand], norm[base], resamples, confidence, seed)
    word, reason = verdict(improvement, difference)
    per_env = {}
    for j, env in enumerate(envs):
        cells = {}
        for role, agent in (("candidate", cand), ("baseline", base)):
            values = raw[agent][j]
            iv = stats.bootstrap_interval(values, "iqm", resamples, confidence,
                                          keyed_rng(seed, "per_env", agent, env))
            cells[role] = {**iv.as_dict(), "n_seeds": int(values.size)}
        env_p = pair_improvement(cand, base, [norm[cand][j]], [norm[base][j]], resamples,
                                 confidence, seed, "improvement_env", env)
        per_env[env] = {"raw_iqm": cells, "probability_of_improvement": env_p.as_dict()}
    aggregate = {a: stats.aggregate_intervals(norm[a], resamples, confidence,
                                              keyed_rng(seed, "aggregate", a))["iqm"].as_dict()
                 for a in (cand, base)}
    return {
        "baseline": base,
        "verdict": word,
        "reason": reason,
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
            "random_episodes": opts.random_episodes}


def compute_comparison(opts: argparse.Namespace) -> dict[str, Any]:
    """The compare.json document; raises ConfigError on bad input and MissingRandomScore
    when an env's random score must be measured first (as the report does); writes nothing."""
    cells = load_cells(opts, opts.allow_few)
    agents = [cells.candidate, *cells.baselines]
    compared = [r for a in agents for e in cells.envs for r in cells.by_cell[(a, e)]]
    raw_score = {r.run_id: scores.score_run(r, opts.score, opts.last_k) for r in compared}
    targets = {e: scores.reference_score(cells.env_cfgs[e]) for e in cells.envs}
    references = {}
    for env in cells.envs:
        randoms, excluded = selection.matching_random_runs(
            cells.sweep.runs, env, cells.env_cfgs[env], cells.eval_settings[env])
        cells.problems += excluded
        references[env] = selection.make_reference(
            Path(opts.sweep).parent, cells.env_cfgs[env], cells.eval_settings[env],
            targets[env], randoms, opts)
    raw = {a: [np.array([raw_score[r.run_id] for r in cells.by_cell[(a, e)]])
               for e in cells.envs] for a in agents}
    norm = {a: [np.asarray(references[e].normalise(v), dtype=float)
                for e, v in zip(cells.envs, raw[a], strict=True)] for a in agents}
    comparisons = [compare_pair(cells.candidate, b, cells.envs, norm, raw, opts.resamples,
                                opts.confidence, opts.seed) for b in cells.baselines]
    tuned = {a: tuning.tuning_of([r for e in cells.envs for r in cells.by_cell[(a, e)]])
             for a in agents}
    return {
        "sweep": cells.sweep.name,
        "candidate": cells.candidate,
        "baselines": cells.baselines,
        "envs": cells.envs,
        "verdict_rule": VERDICT_RULE,
        "comparisons": comparisons,
        "tuning": tuned,
        "tuning_note": tuning.tuning_note(cells.candidate, tuned),
        "references": {e: references[e].as_dict() for e in cells.envs},
        "evaluation": cells.eval_settings,
        "bootstrap": {"resamples": opts.resamples, "confidence": opts.confidence,
                      "seed": opts.seed, "method": "stratified (strata = envs), percentile"},
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
    gymnasium id or env config name)."""
    aliases = {e: e for e in envs}
    for r in sweep.runs:
        if r.env_key in envs:
            aliases.setdefault(r.env_config, r.env_key)
            if r.env_id == r.env_key:
                aliases.setdefault(r.env_id, r.env_key)
    out: dict[str, float] = {}
    for item in items or []:
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
    return out


def plan_seeds(opts: argparse.Namespace) -> dict[str, Any]:
    """The seed plan per env and baseline; ConfigError on bad input; writes nothing."""
    cells = load_cells(opts, allow_few=False, pilot=True)
    differences = parse_differences(opts.difference, cells.envs, cells.sweep)
    plans = []
    for base in cells.baselines:
        for env in cells.envs:
            x = np.array([scores.score_run(r, opts.score, opts.last_k)
                          for r in cells.by_cell[(cells.candidate, env)]])
            y = np.array([scores.score_run(r, opts.score, opts.last_k)
                          for r in cells.by_cell[(base, env)]])
            observed = float(x.mean() - y.mean())
            d = differences.get(env, observed)
            if d == 0:
                raise ConfigError("--difference", f"{env}: the pilot means of "
                                  f"{cells.candidate} and {base} are equal, so there is no "
                                  f"observed difference; give --difference {env}=D")
            if np.ptp(x) == 0 and np.ptp(y) == 0:
                raise ConfigError("runs", f"{env}: every pilot run of {cells.candidate} and "
                                  f"{base} has the same score; power needs spread in the scores")
            rng = keyed_rng(opts.seed, "plan_seeds", cells.candidate, base, env)
            plan = power.seeds_needed(x, y, d, opts.power, opts.alpha, rng,
                                      max_seeds=opts.max_seeds, resamples=opts.resamples,
                                      alternative=opts.alternative)
            plans.append({
                "env": env, "baseline": base, "pilot_seeds": [int(x.size), int(y.size)],
                "candidate_mean": float(x.mean()), "baseline_mean": float(y.mean()),
                "candidate_sd": float(x.std(ddof=1)), "baseline_sd": float(y.std(ddof=1)),
                "observed_difference": observed, "difference": d,
                "difference_source": "--difference" if env in differences else "observed",
                "seeds_per_agent": plan.seeds, "seeds_label": plan.label,
                "power_at_seeds": plan.power,
                "power_curve": {str(n): p for n, p in plan.curve.items()},
            })
    return {
        "sweep": cells.sweep.name, "candidate": cells.candidate, "baselines": cells.baselines,
        "envs": cells.envs, "power": opts.power, "alpha": opts.alpha,
        "alternative": opts.alternative, "max_seeds": opts.max_seeds,
        "resamples": opts.resamples, "seed": opts.seed, "score": opts.score,
        "test": "Welch's t-test (scipy.stats.ttest_ind, equal_var=False)",
        "method": "bootstrap power analysis of Colas, Sigaud and Oudeyer 2018, How Many "
                  "Random Seeds? (arXiv:1806.08295): candidate pilot scores shifted so the "
                  "mean difference is D, both resampled with replacement",
        "plans": plans,
        "excluded_runs": [vars(p) for p in cells.problems],
    }
