"""The ``report`` command: aggregate a sweep's runs into tables, figures and one HTML page.

``seedsweep report results/<sweep>`` reads every run folder, leaves out (and lists) runs
that are not complete, normalises scores per env against the random agent and a reference
score (:mod:`runner.scores`), computes aggregates with stratified bootstrap intervals
(:mod:`runner.stats`) and writes ``results/<sweep>/report/``: summary.json, scores.csv,
curves.csv, figures (PNG and SVG) and report.html. The report is built in a temporary
folder and renamed into place, so a failed or refused report never leaves a partial one.
With ``--candidate NAME`` (or when the old report folder has a compare.json, which is then
recomputed from its recorded request) the report also carries compare.json and a Comparison
section (:mod:`runner.compare`).
"""

from __future__ import annotations

import argparse
import json
import os
import shutil
import sys
import tempfile
import time
from collections import defaultdict
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from seedsweep.agents.base import ConfigError
from seedsweep.runner.execution import records
from seedsweep.runner.analysis import scores
from seedsweep.runner.analysis import stats
from seedsweep.runner.commands.options import OneLineParser
from seedsweep.runner.analysis.scores import RANDOM_AGENT, Problem, Reference, Run

ORACLE_PROTOCOL = (
    "Oracle references are the exact optimal expected undiscounted return from the start "
    "distribution under the env's time limit (finite-horizon backward induction over "
    "max_episode_steps steps; value iteration when the env has no time limit)."
)
CURVE_POINTS_NOTE = "IQM of normalised scores over all runs of all envs at each evaluation"


def build_parser() -> argparse.ArgumentParser:
    p = OneLineParser("report", prog="seedsweep report",
                      description="Aggregate a sweep into a report.")
    p.add_argument("sweep", help="the sweep folder, e.g. results/<sweep>")
    p.add_argument("--agents", help="comma-separated agents to compare (default: all but random)")
    p.add_argument("--envs", help="comma-separated envs (gymnasium ids or env config names)")
    p.add_argument("--include-random", action="store_true",
                   help="also count the random agent as a compared agent")
    p.add_argument("--score", default="final", choices=scores.SCORE_METHODS,
                   help="run score: last evaluation, mean of the last K, or area under curve")
    p.add_argument("--last-k", type=int, default=3, help="K for --score last-k (default 3)")
    p.add_argument("--confidence", type=float, default=0.95, help="interval level (0.95)")
    p.add_argument("--resamples", type=int, default=2000, help="bootstrap resamples (2000)")
    p.add_argument("--seed", type=int, default=0, help="bootstrap seed (0)")
    p.add_argument("--allow-few", action="store_true",
                   help="report agent-env cells with a single complete run")
    p.add_argument("--interpolate", action="store_true",
                   help="interpolate curves of runs with different evaluation schedules")
    p.add_argument("--random-episodes", type=int, default=None,
                   help="episodes when the random score must be measured (default: max(100, "
                   "eval.episodes))")
    p.add_argument("--candidate", default=None,
                   help="also compare this agent with baselines (see seedsweep compare)")
    p.add_argument("--baseline", action="append", default=None,
                   help="a baseline for --candidate (repeat; default: all but random)")
    p.add_argument("--no-figures", action="store_true", help="skip figures (faster)")
    p.add_argument("--quiet", action="store_true", help="no terminal summary")
    return p


def parse_options(argv: Sequence[str]) -> argparse.Namespace:
    opts = build_parser().parse_args(list(argv))
    check_statistics_options(opts)
    return opts


def check_statistics_options(opts: argparse.Namespace) -> None:
    """Range checks of the options report and compare share (one line, exit 2 on error)."""
    if not 0.0 < opts.confidence < 1.0:
        raise ConfigError("--confidence", f"must be in (0, 1) (got {opts.confidence})")
    check_resampling_options(opts)
    if opts.random_episodes is not None and opts.random_episodes < 2:
        raise ConfigError("--random-episodes", f"must be >= 2 (got {opts.random_episodes})")


def check_resampling_options(opts: argparse.Namespace) -> None:
    """Range checks of --resamples, --seed and --last-k (report, compare, plan-seeds)."""
    if opts.resamples < 100:
        raise ConfigError("--resamples", f"must be >= 100 (got {opts.resamples})")
    if opts.seed < 0:
        raise ConfigError("--seed", f"must be >= 0 (got {opts.seed})")
    if opts.last_k < 1:
        raise ConfigError("--last-k", f"must be >= 1 (got {opts.last_k})")


# -- the computed report --------------------------------------------------------------------


@dataclass
class Curve:
    x: np.ndarray
    point: np.ndarray
    low: np.ndarray
    high: np.ndarray


@dataclass
class ReportData:
    sweep: scores.Sweep
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
    timing: dict[str, float] = field(default_factory=dict)


def compute_report(opts: argparse.Namespace, runner: Any = None) -> ReportData:
    """Everything the report shows; raises ConfigError on bad input, writes nothing but the
    random-score cache."""
    sweep_dir = Path(opts.sweep)
    sweep = scores.load_sweep(sweep_dir)
    problems = list(sweep.problems)
    agents = select_agents(sweep, opts.agents, opts.include_random)
    envs = select_envs(sweep, agents, opts.envs)
    by_cell = group_runs(sweep.runs, agents, envs)
    check_cells(by_cell, agents, envs, sweep.problems, opts.allow_few)
    env_cfgs, eval_settings = check_settings(by_cell, agents, envs)
    problems += missing_runs(sweep, agents, envs, by_cell)

    # every check that can refuse comes before the random agent is run for the cache
    env_grids = {e: align_env(agents, e, by_cell, opts.interpolate) for e in envs}
    axis = efficiency_axis(envs, env_grids, opts.interpolate)
    compared = [r for a in agents for e in envs for r in by_cell[(a, e)]]
    raw = {r.run_id: scores.score_run(r, opts.score, opts.last_k) for r in compared}
    targets = {e: scores.reference_score(env_cfgs[e]) for e in envs}

    references: dict[str, Reference] = {}
    random_shown: dict[str, list[Run]] = {}
    for env in envs:
        randoms, excluded = matching_random_runs(sweep.runs, env, env_cfgs[env],
                                                 eval_settings[env])
        problems += excluded
        references[env] = make_reference(sweep_dir.parent, env_cfgs[env], eval_settings[env],
                                         targets[env], randoms, opts, runner)
        if not any(RANDOM_AGENT == r.agent for a in agents for r in by_cell.get((a, env), [])):
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
                                     _rng(opts.seed, "aggregate", a))
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
    return ReportData(
        sweep=sweep, options=vars(opts).copy(), agents=agents, shown=shown, envs=envs,
        runs=used, references=references, run_scores=run_scores, aggregates=aggregates,
        n_runs={a: sum(len(by_cell[(a, e)]) for e in envs) for a in agents},
        improvement=improvement, profiles=profiles, efficiency=efficiency,
        efficiency_x=x_label, per_env=per_env, env_curves=env_curves, problems=problems,
        eval_settings=eval_settings,
        timing={"aggregates_s": round(t1 - t0, 3), "sample_efficiency_s": round(t2 - t1, 3),
                "per_env_s": round(t3 - t2, 3), "n_scores": len(used)},
    )


def _rng(seed: int, purpose: str, *names: str) -> np.random.Generator:
    """A generator per (purpose, agents), so adding an agent does not change the others."""
    return np.random.default_rng([seed, scores.stable_key(purpose, *names)])


# -- selection and checks -------------------------------------------------------------------


def select_agents(sweep: scores.Sweep, wanted: str | None, include_random: bool) -> list[str]:
    labels = sorted({r.label for r in sweep.runs})
    base = defaultdict(list)
    for r in sweep.runs:
        if r.label not in base[r.agent]:
            base[r.agent].append(r.label)
    known = sorted(set(labels) | set(base) | {p.agent for p in sweep.problems if p.agent != "?"})
    if wanted:
        chosen: list[str] = []
        for name in split_names(wanted):
            if name in labels:
                options = [name]
            elif name in base:
                options = sorted(base[name])
            elif name in known:
                options = [name]  # only runs that are not complete: check_cells says so
            else:
                raise ConfigError("--agents", f"unknown agent {name!r} (in this sweep: "
                                  f"{', '.join(known)})")
            chosen += [o for o in options if o not in chosen]
        if not chosen:
            raise ConfigError("--agents", "no agent named")
        return chosen
    chosen = [lab for lab in labels if include_random or not _is_random(sweep, lab)]
    if not chosen:
        raise ConfigError("--agents", "the sweep has only random-agent runs; pass "
                          "--include-random to report them")
    return chosen


def split_names(text: str) -> list[str]:
    """Comma-separated names; commas inside [...] (variant labels) do not split."""
    names, depth, current = [], 0, ""
    for ch in text:
        depth += (ch == "[") - (ch == "]")
        if ch == "," and depth == 0:
            names.append(current.strip())
            current = ""
        else:
            current += ch
    names.append(current.strip())
    return [n for n in names if n]


def _is_random(sweep: scores.Sweep, label: str) -> bool:
    return any(r.label == label and r.agent == RANDOM_AGENT for r in sweep.runs)


def select_envs(sweep: scores.Sweep, agents: list[str], wanted: str | None) -> list[str]:
    present = sorted({r.env_key for r in sweep.runs if r.label in agents}
                     | {p.env for p in sweep.problems if p.agent in agents and p.env != "?"})
    if not wanted:
        return present
    names = {r.env_config: r.env_key for r in sweep.runs}
    names.update({r.env_id: r.env_key for r in sweep.runs if r.env_id == r.env_key})
    chosen = []
    for name in split_names(wanted):
        env = name if name in present else names.get(name)
        if env not in present:
            raise ConfigError("--envs", f"unknown env {name!r} (in this sweep: "
                              f"{', '.join(present)})")
        if env not in chosen:
            chosen.append(env)
    return chosen


def group_runs(runs: list[Run], agents: list[str], envs: list[str]) -> dict:
    cells: dict[tuple[str, str], list[Run]] = {(a, e): [] for a in agents for e in envs}
    seen: dict[tuple[str, str, int], str] = {}
    for r in runs:
        if (r.label, r.env_key) not in cells:
            continue
        key = (r.label, r.env_key, r.seed)
        if key in seen:
            raise ConfigError("seed", f"{r.label} on {r.env_key} has two complete runs with "
                              f"seed {r.seed} ({seen[key]}, {r.run_id}); remove one")
        seen[key] = r.run_id
        cells[(r.label, r.env_key)].append(r)
    for cell in cells.values():
        cell.sort(key=lambda r: r.seed)
    return cells


def check_cells(by_cell: dict, agents: list[str], envs: list[str], problems: list[Problem],
                allow_few: bool) -> None:
    need = 1 if allow_few else 2
    for a in agents:
        for e in envs:
            n = len(by_cell[(a, e)])
            if n >= need:
                continue
            left_out = sum(1 for p in problems if p.agent == a.split("[")[0] and p.env == e)
            extra = f", {left_out} not complete" if left_out else ""
            if n == 0:
                raise ConfigError("runs", f"{a} has no complete run on {e}{extra}; complete "
                                  "them, or leave it out with --agents/--envs")
            raise ConfigError("runs", f"{a} has {n} complete run on {e}{extra}; at least 2 "
                              "are needed for an interval (pass --allow-few to report anyway)")


def check_settings(by_cell: dict, agents: list[str], envs: list[str]) -> tuple[dict, dict]:
    """One env config and one evaluation protocol per env, or a refusal naming both."""
    env_cfgs, eval_settings = {}, {}
    for e in envs:
        runs = [r for a in agents for r in by_cell[(a, e)]]
        first = runs[0]
        for r in runs[1:]:
            if r.env_settings != first.env_settings:
                diff = [k for k in first.env_settings if r.env_settings[k] != first.env_settings[k]]
                raise ConfigError("env." + diff[0], f"{e}: runs differ in env.{diff[0]} "
                                  f"({first.run_id}: {first.env_settings[diff[0]]!r}, "
                                  f"{r.run_id}: {r.env_settings[diff[0]]!r}); report them "
                                  "as separate sweeps")
            ref_a = (first.config.get("env") or {}).get("reference")
            ref_b = (r.config.get("env") or {}).get("reference")
            if ref_a != ref_b:
                raise ConfigError("env.reference", f"{e}: runs set different references "
                                  f"({first.run_id}: {ref_a!r}, {r.run_id}: {ref_b!r})")
            if r.eval_settings != first.eval_settings:
                raise ConfigError(
                    "eval", f"{e}: runs use different evaluation settings ({first.run_id}: "
                    f"{_fmt_eval(first.eval_settings)}; {r.run_id}: {_fmt_eval(r.eval_settings)})")
        env_cfgs[e] = dict(first.config.get("env") or {})
        episodes, deterministic = first.eval_settings
        eval_settings[e] = {"episodes": episodes, "deterministic": deterministic}
    return env_cfgs, eval_settings


def _fmt_eval(settings: tuple[int, bool]) -> str:
    return f"eval.episodes={settings[0]}, eval.deterministic={str(settings[1]).lower()}"


def missing_runs(sweep: scores.Sweep, agents: list[str], envs: list[str],
                 by_cell: dict) -> list[Problem]:
    """Seeds that other compared agents ran on an env but this agent has no folder for."""
    out = []
    for e in envs:
        seeds = {r.seed for a in agents for r in by_cell[(a, e)]}
        seeds |= {p.seed for p in sweep.problems if p.env == e and isinstance(p.seed, int)}
        for a in agents:
            have = {r.seed for r in by_cell[(a, e)]}
            listed = {p.seed for p in sweep.problems if p.env == e and p.agent == a.split("[")[0]}
            for s in sorted(seeds - have - listed):
                out.append(Problem("-", a, e, s, "missing",
                                   "no run folder for this seed (other agents have one)"))
    return out


def matching_random_runs(runs: list[Run], env: str, env_cfg: dict, settings: dict) -> tuple:
    """Random-agent runs of ``env`` measured under the same env and evaluation settings."""
    wanted = (settings["episodes"], settings["deterministic"])
    use, excluded = [], []
    for r in runs:
        if r.env_key != env or r.agent != RANDOM_AGENT:
            continue
        if r.env_settings == scores.env_settings(env_cfg) and r.eval_settings == wanted:
            use.append(r)
        else:
            excluded.append(Problem(r.run_id, r.label, env, r.seed, "complete",
                                    "random run not used: its env or evaluation settings differ "
                                    "from the compared runs"))
    return sorted(use, key=lambda r: r.seed), excluded


def make_reference(results_dir: Path, env_cfg: dict, settings: dict, target: tuple,
                   randoms: list[Run], opts: argparse.Namespace, runner: Any) -> Reference:
    """Random score (from the sweep's random runs, else measured into the cache) and the
    reference ``target`` = (value, source, detail) of one env."""
    env_id = str(env_cfg.get("id"))
    reference, source, detail = target
    if randoms:
        interval, n = scores.random_from_runs(randoms, opts.confidence)
        origin, ids = "sweep", [r.run_id for r in randoms]
    else:
        episodes = opts.random_episodes or max(100, settings["episodes"])
        interval, n, rid = scores.random_from_cache(
            results_dir, env_cfg, settings["deterministic"], episodes, opts.confidence, runner)
        origin, ids = "cache", [rid]
    if np.isclose(reference, interval.point):
        raise ConfigError("env.reference", f"{env_id}: reference {reference} equals the random "
                          f"score {interval.point}; normalised scores are undefined")
    return Reference(env_id, str(env_cfg.get("name")), interval.point, interval.low,
                     interval.high, n, origin, ids, reference, source, detail)


# -- statistics -----------------------------------------------------------------------------


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
                _rng(opts.seed, "improvement", x, y))
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
            strata[a], taus, opts.resamples, opts.confidence, _rng(opts.seed, "profile", a))
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
                                           _rng(opts.seed, "efficiency", a))
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
                                          _rng(opts.seed, "per_env", a, e))
            table[a][e] = (iv, len(runs))
    return dict(table)


def per_env_curves(agents, envs, by_cell, env_grids, opts) -> dict:
    out: dict[str, dict[str, Curve]] = {}
    for e in envs:
        grid, curves, rows = env_grids[e]
        out[e] = {}
        for a in agents:
            point, low, high = stats.iqm_curve([curves[rows[a]]], opts.resamples, opts.confidence,
                                               _rng(opts.seed, "env_curve", a, e))
            out[e][a] = Curve(grid, point, low, high)
    return out


# -- outputs --------------------------------------------------------------------------------


def summary_dict(data: ReportData) -> dict[str, Any]:
    opts = data.options
    return {
        "sweep": data.sweep.name,
        "agents": {
            a: {**{k: v.as_dict() for k, v in data.aggregates[a].items()},
                "n_runs": data.n_runs[a]}
            for a in data.agents
        },
        "n_envs": len(data.envs),
        "envs": data.envs,
        "probability_of_improvement": data.improvement,
        "references": {e: data.references[e].as_dict() for e in data.envs},
        "bootstrap": {"resamples": opts["resamples"], "confidence": opts["confidence"],
                      "seed": opts["seed"], "method": "stratified (strata = envs), percentile"},
        "score": {"method": opts["score"], "last_k": opts["last_k"] if opts["score"] == "last-k"
                  else None, "normalisation": "(score - random) / (reference - random)"},
        "evaluation": data.eval_settings,
        "oracle_protocol": ORACLE_PROTOCOL,
        "per_env": {a: {e: {**iv.as_dict(), "n_seeds": n} for e, (iv, n) in envs.items()}
                    for a, envs in data.per_env.items()},
        "sample_efficiency_x": data.efficiency_x,
        "shown_agents": data.shown,
        "excluded_runs": [vars(p) for p in data.problems],
        "timing": data.timing,
    }


def scores_csv(data: ReportData) -> str:
    from seedsweep.runner.execution.records import csv_text

    rows = [(data.sweep.name, r.run_id, r.label, r.env_key, r.seed, *data.run_scores[r.run_id])
            for r in data.runs]
    return csv_text(("sweep", "run_id", "agent", "env", "seed", "score", "normalised_score"),
                    rows)


def curves_csv(data: ReportData) -> str:
    from seedsweep.runner.execution.records import csv_text

    rows = []
    for r in data.runs:
        norm = data.references[r.env_key].normalise(r.curve)
        for step, value, n in zip(r.steps, r.curve, norm, strict=True):
            rows.append((data.sweep.name, r.run_id, r.label, r.env_key, r.seed, int(step),
                         float(value), float(n)))
    return csv_text(("sweep", "run_id", "agent", "env", "seed", "env_step", "mean_return",
                     "normalised_return"), rows)


def write_report(data: ReportData, with_figures: bool = True, comparison: Any = None) -> Path:
    """Build the report in a temporary folder beside the final one, then rename it in.
    ``comparison`` (:class:`runner.compare.ReportComparison`) adds compare.json and the
    page's Comparison section."""
    from seedsweep.runner.present import html as html_report
    from seedsweep.runner.execution.records import atomic_write_bytes, atomic_write_text, fsync_dir

    sweep_dir = data.sweep.path
    target = sweep_dir / "report"
    tmp = Path(tempfile.mkdtemp(prefix=".report-tmp-", dir=sweep_dir))
    tmp.chmod(0o777 & ~records._UMASK)  # mkdtemp makes 0700
    try:
        figures: dict[str, tuple[bytes, bytes]] = {}
        if with_figures:
            from seedsweep.runner.present import figures as figs

            t0 = time.perf_counter()
            figures = figs.all_figures(data)
            data.timing["figures_s"] = round(time.perf_counter() - t0, 3)
            for name, (png, svg) in figures.items():
                atomic_write_bytes(tmp / "figures" / f"{name}.png", png)
                atomic_write_bytes(tmp / "figures" / f"{name}.svg", svg)
        summary = summary_dict(data)
        atomic_write_text(tmp / "summary.json", json.dumps(summary, indent=2, default=_json) + "\n")
        atomic_write_text(tmp / "scores.csv", scores_csv(data))
        atomic_write_text(tmp / "curves.csv", curves_csv(data))
        if comparison is not None:
            atomic_write_text(tmp / "compare.json", comparison.text)
        atomic_write_text(tmp / "report.html",
                          html_report.render(data, summary, figures, comparison))
        old = None
        if target.exists():
            old = Path(tempfile.mkdtemp(prefix=".report-old-", dir=sweep_dir))
            os.replace(target, old / "report")
        os.replace(tmp, target)
        fsync_dir(sweep_dir)
        if old is not None:
            shutil.rmtree(old, ignore_errors=True)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    return target


def _json(value: Any) -> Any:
    if isinstance(value, np.generic):
        return value.item()
    if isinstance(value, Path):
        return str(value)
    raise TypeError(f"not JSON serialisable: {type(value).__name__}")


def print_summary(data: ReportData, target: Path, comparison: Any = None) -> None:
    from rich.console import Console
    from rich.table import Table

    console = Console(file=sys.stdout, width=120)
    table = Table(title=f"sweep {data.sweep.name}: normalised scores, "
                  f"{data.options['confidence']:.0%} stratified bootstrap intervals "
                  f"({len(data.envs)} envs)")
    for col in ("agent", "runs", "IQM", "mean", "median", "optimality gap"):
        table.add_column(col, justify="left" if col == "agent" else "right")
    for a in data.agents:
        agg = data.aggregates[a]
        table.add_row(a, str(data.n_runs[a]), *(_fmt_iv(agg[k]) for k in stats.STATISTICS))
    console.print(table, markup=False)
    refs = Table(title="references per env")
    for col in ("env", "random (CI)", "reference", "source"):
        refs.add_column(col)
    for e in data.envs:
        r = data.references[e]
        refs.add_row(e, f"{r.random:.4g} [{r.random_low:.4g}, {r.random_high:.4g}]",
                     f"{r.reference:.4g}", f"{r.source} ({r.detail})")
    console.print(refs, markup=False)
    if data.problems:
        console.print(f"{len(data.problems)} run(s) left out; listed in the report.",
                      markup=False)
    if comparison is not None and comparison.doc is not None:
        for c in comparison.doc["comparisons"]:
            console.print(f"{comparison.doc['candidate']} vs {c['baseline']}: {c['verdict']}",
                          markup=False)
    if comparison is not None and comparison.note:
        console.print(comparison.note, markup=False)
    console.print(f"report: {target}", markup=False)


def _fmt_iv(iv: stats.Interval) -> str:
    return f"{iv.point:.3f} [{iv.low:.3f}, {iv.high:.3f}]"


def report_main(argv: list[str]) -> int:
    """``seedsweep report results/<sweep> [options]``; returns the exit status."""
    try:
        from seedsweep.runner.analysis import compare

        opts = parse_options(argv)
        data = compute_report(opts)
        comparison = compare.for_report(opts)  # refusals come before anything is written
        target = write_report(data, with_figures=not opts.no_figures, comparison=comparison)
    except ConfigError as err:
        print(f"seedsweep: error: {err}", file=sys.stderr)
        return 2
    if not opts.quiet:
        print_summary(data, target, comparison)
    return 0
