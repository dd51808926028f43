"""Everything a report shows, computed from a sweep's records (nothing written).

Selects agents and envs (:mod:`.selection`), checks that each env has one env config and one
evaluation protocol, scores runs, finds random and reference scores (:mod:`.scores`) and
computes the aggregates with stratified bootstrap intervals (:mod:`.stats`).
"""

from __future__ import annotations

import argparse
import time
from collections import defaultdict
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
from seedsweep.configs.checks import ConfigError
from seedsweep.runner.analysis import scores, selection, sensitivity, stats, tuning
from seedsweep.runner.analysis.runs import Problem, Run, Sweep, load_sweep
from seedsweep.runner.analysis.scores import Reference
from seedsweep.runner.analysis.stats import keyed_rng

ORACLE_PROTOCOL = (
    "Oracle references are the exact optimal expected undiscounted return from the start "
    "distribution under the env's time limit (finite-horizon backward induction over "
    "max_episode_steps steps; value iteration when the env has no time limit). Under a time "
    "limit the optimum may need a policy that looks at the time step, which an agent that "
    "sees only the state cannot follow: on slippery 4x4 FrozenLake with its 100-step limit "
    "the optimum is 0.7442 and the best stationary policy reaches 0.740165, so a perfect "
    "Markov agent normalises to about 0.995."
)


@dataclass
class Curve:
    x: np.ndarray
    point: np.ndarray
    low: np.ndarray
    high: np.ndarray


@dataclass
class ReportData:
    sweep: Sweep
    options: dict[str, Any]
    agents: list[str]  # compared agent labels
    shown: list[str]  # compared + random runs shown
    envs: list[str]  # gymnasium ids
    runs: list[Run]  # complete runs used (compared and shown random runs)
    references: dict[str, Reference]
    run_scores: dict[str, tuple[float, float]]  # run_id -> (score, normalised)
    aggregates: dict[str, dict[str, stats.Interval]]
    n_runs: dict[str, int]
    improvement: list[dict[str, Any]]
    profiles: dict[str, Curve]
    efficiency: dict[str, Curve]
    efficiency_x: str
    per_env: dict[str, dict[str, tuple[stats.Interval, int]]]
    env_curves: dict[str, dict[str, Curve]]
    problems: list[Problem]
    eval_settings: dict[str, dict[str, Any]]
    floor_labels: frozenset[str] = frozenset()  # shown labels of the random floor's runs
    timing: dict[str, float] = field(default_factory=dict)
    tuning: dict[str, dict[str, Any] | None] = field(default_factory=dict)  # label -> tuned
    sensitivity: list[sensitivity.SensitivityTable] = field(default_factory=list)


def compute_report(opts: argparse.Namespace) -> ReportData:
    """Everything the report shows; raises ConfigError on bad input and MissingRandomScore
    when an env's random score must be measured first; writes nothing."""
    sweep_dir = Path(opts.sweep)
    sweep = load_sweep(sweep_dir)
    tuning.check_not_mixed(sweep.runs, sweep_dir)
    problems = list(sweep.problems)
    agents = selection.select_agents(sweep, opts.agents, opts.include_random)
    envs = selection.select_envs(sweep, agents, opts.envs)
    by_cell = selection.group_runs(sweep.runs, agents, envs)
    selection.check_cells(by_cell, agents, envs, sweep.problems, opts.allow_few)
    env_cfgs, eval_settings = selection.check_settings(by_cell, agents, envs)
    problems += selection.missing_runs(sweep, agents, envs, by_cell)

    # every check that can refuse comes before a missing random score is asked for
    env_grids = {e: align_env(agents, e, by_cell, opts.interpolate) for e in envs}
    axis = efficiency_axis(envs, env_grids, opts.interpolate)
    compared = [r for a in agents for e in envs for r in by_cell[(a, e)]]
    raw = {r.run_id: scores.score_run(r, opts.score, opts.last_k) for r in compared}
    targets = {e: scores.reference_score(env_cfgs[e]) for e in envs}

    references: dict[str, Reference] = {}
    random_shown: dict[str, list[Run]] = {}
    for env in envs:
        randoms, excluded = selection.matching_random_runs(sweep.runs, env, env_cfgs[env],
                                                 eval_settings[env])
        problems += excluded
        references[env] = selection.make_reference(
            sweep_dir.parent, env_cfgs[env], eval_settings[env], targets[env], randoms, opts)
        if not any(r.is_floor for a in agents for r in by_cell.get((a, env), [])):
            random_shown[env] = randoms

    shown = list(agents)
    random_labels = sorted({r.label for rs in random_shown.values() for r in rs})
    shown += [lab for lab in random_labels if lab not in shown]
    used = compared + [r for rs in random_shown.values() for r in rs]
    for r in used:
        if r.run_id not in raw:  # random runs shown beside the compared agents: their
            # schedule may be shorter, so last-k uses at most the evaluations they have
            raw[r.run_id] = scores.score_run(r, opts.score, min(opts.last_k, r.curve.size))
    run_scores = {r.run_id: (raw[r.run_id], float(references[r.env_key].normalise(
        raw[r.run_id]))) for r in used}

    t0 = time.perf_counter()
    strata = {a: [np.array([run_scores[r.run_id][1] for r in by_cell[(a, e)]]) for e in envs]
              for a in agents}
    aggregates = {
        a: stats.aggregate_intervals(strata[a], opts.resamples, opts.confidence,
                                     keyed_rng(opts.seed, "aggregate", a))
        for a in agents
    }
    improvement = probability_pairs(agents, strata, opts)
    profiles = performance_profiles(agents, strata, opts)
    t1 = time.perf_counter()
    efficiency, x_label = efficiency_curves(agents, envs, env_grids, axis, references, opts)
    t2 = time.perf_counter()
    per_env = per_env_table(shown, envs, by_cell, random_shown, run_scores, opts)
    env_curves = per_env_curves(agents, envs, by_cell, env_grids, opts)
    t3 = time.perf_counter()
    swept = sensitivity.find_tables(compared, {r.run_id: run_scores[r.run_id][1]
                                               for r in compared},
                                    opts.resamples, opts.confidence, opts.seed)
    return ReportData(
        sweep=sweep, options=vars(opts).copy(), agents=agents, shown=shown, envs=envs,
        runs=used, references=references, run_scores=run_scores, aggregates=aggregates,
        n_runs={a: sum(len(by_cell[(a, e)]) for e in envs) for a in agents},
        improvement=improvement, profiles=profiles, efficiency=efficiency,
        efficiency_x=x_label, per_env=per_env, env_curves=env_curves, problems=problems,
        eval_settings=eval_settings,
        floor_labels=frozenset(r.label for r in used if r.is_floor),
        timing={"aggregates_s": round(t1 - t0, 3), "sample_efficiency_s": round(t2 - t1, 3),
                "per_env_s": round(t3 - t2, 3), "n_scores": len(used)},
        tuning={a: tuning.tuning_of([r for e in envs for r in by_cell[(a, e)]])
                for a in agents},
        sensitivity=swept,
    )


def probability_pairs(agents: list[str], strata: dict, opts: argparse.Namespace) -> list[dict]:
    """P(X > Y) for every ordered pair. Each unordered pair is resampled once, in name order
    (so the result does not depend on which other agents are compared), and
    P(Y > X) = 1 - P(X > Y) on the same resamples since ties count one half."""
    out = []
    for i, first in enumerate(agents):
        for second in agents[i + 1 :]:
            x, y = sorted((first, second))
            iv = stats.probability_of_improvement(
                strata[x], strata[y], opts.resamples, opts.confidence,
                keyed_rng(opts.seed, "improvement", x, y))
            out.append({"x": x, "y": y, "point": iv.point, "low": iv.low, "high": iv.high})
            out.append({"x": y, "y": x, "point": 1.0 - iv.point, "low": 1.0 - iv.high,
                        "high": 1.0 - iv.low})
    return out


def performance_profiles(agents: list[str], strata: dict, opts: argparse.Namespace) -> dict:
    values = np.concatenate([s for a in agents for s in strata[a]])
    lo, hi = min(0.0, float(values.min())), max(1.0, float(values.max()))
    taus = np.linspace(lo, hi, 101)
    out = {}
    for a in agents:
        point, low, high = stats.performance_profile(
            strata[a], taus, opts.resamples, opts.confidence, keyed_rng(opts.seed, "profile", a))
        out[a] = Curve(taus, point, low, high)
    return out


def efficiency_axis(envs: list[str], env_grids: dict, interpolate: bool) -> tuple:
    """(x, label, per-env x or None) of the sample-efficiency curve. Envs on one schedule
    use env steps; otherwise the x axis is the fraction of each env's training budget,
    which must coincide across envs unless ``interpolate``."""
    grids = [env_grids[e][0] for e in envs]
    if all(g.shape == grids[0].shape and np.array_equal(g, grids[0]) for g in grids):
        return grids[0], "env steps", None
    fractions = [g / g[-1] for g in grids]
    same = all(f.shape == fractions[0].shape and np.allclose(f, fractions[0])
               for f in fractions)
    if not same and not interpolate:
        raise ConfigError("eval.every", "envs have different evaluation schedules, so the "
                          "sample-efficiency curve needs --interpolate (onto fractions of "
                          "each env's budget)")
    x = fractions[0] if same else np.unique(np.concatenate(fractions))
    x = x[x >= max(f[0] for f in fractions)]
    return x, "fraction of training budget", fractions


def efficiency_curves(agents, envs, env_grids, axis, references, opts) -> tuple[dict, str]:
    """IQM of normalised scores at each evaluation, pooled over all runs of all envs."""
    x, label, per_env_x = axis
    out = {}
    for a in agents:
        per_env = []
        for j, e in enumerate(envs):
            _, curves, rows = env_grids[e]
            norm = references[e].normalise(curves[rows[a]])
            if per_env_x is not None:
                norm = np.stack([np.interp(x, per_env_x[j], c) for c in norm])
            per_env.append(norm)
        point, low, high = stats.iqm_curve(per_env, opts.resamples, opts.confidence,
                                           keyed_rng(opts.seed, "efficiency", a))
        out[a] = Curve(np.asarray(x, float), point, low, high)
    return out, label


def align_env(agents: list[str], env: str, by_cell: dict, interpolate: bool) -> tuple:
    """(grid, curves, rows): the env's curves of all compared runs on one grid, and the rows
    of each agent in that matrix."""
    runs, rows, start = [], {}, 0
    for a in agents:
        cell = by_cell[(a, env)]
        rows[a] = slice(start, start + len(cell))
        start += len(cell)
        runs += cell
    grid, curves = scores.align_curves(runs, interpolate, env)
    return grid, curves, rows


def per_env_table(shown, envs, by_cell, random_shown, run_scores, opts) -> dict:
    """IQM of raw scores with a percentile bootstrap interval, and seeds, per agent and env."""
    table: dict[str, dict[str, tuple[stats.Interval, int]]] = defaultdict(dict)
    for a in shown:
        for e in envs:
            runs = by_cell.get((a, e)) or [r for r in random_shown.get(e, []) if r.label == a]
            if not runs:
                continue
            values = np.array([run_scores[r.run_id][0] for r in runs])
            iv = stats.bootstrap_interval(values, "iqm", opts.resamples, opts.confidence,
                                          keyed_rng(opts.seed, "per_env", a, e))
            table[a][e] = (iv, len(runs))
    return dict(table)


def per_env_curves(agents, envs, by_cell, env_grids, opts) -> dict:
    out: dict[str, dict[str, Curve]] = {}
    for e in envs:
        grid, curves, rows = env_grids[e]
        out[e] = {}
        for a in agents:
            point, low, high = stats.iqm_curve([curves[rows[a]]], opts.resamples, opts.confidence,
                                               keyed_rng(opts.seed, "env_curve", a, e))
            out[e][a] = Curve(grid, point, low, high)
    return out
