"""The ``compare`` and ``plan-seeds`` commands: one candidate agent against baselines.

``seedsweep compare results/<sweep> --candidate NAME [--baseline NAME ...]`` loads the sweep
with the report's rules (:mod:`runner.scores`, :mod:`runner.report`: only complete runs, at
least 2 per agent and env unless --allow-few, one protocol per env, the same random and
reference scores), and for each baseline computes

* per env: IQM of raw scores with a bootstrap interval, the seed count, and P(cand > base);
* over envs: the IQM difference of normalised scores (candidate - baseline), with a
  stratified bootstrap interval (each agent's runs resampled within each env, independently);
* over envs: the probability of improvement P(candidate > baseline) (:mod:`runner.stats`);
* a verdict (:data:`VERDICT_RULE`).

It prints a table and writes ``results/<sweep>/report/compare.json`` (atomically; the report
folder is created when missing, nothing else in it is touched). When ``report/report.html``
exists, its Comparison section is replaced in place. ``seedsweep report`` keeps the
comparison: with ``--candidate`` it computes one with the report's options, otherwise it
recomputes the one recorded in ``compare.json`` (its ``request``) so page and file stay current.

``seedsweep plan-seeds`` estimates, per env, the seeds per agent a later comparison needs
(:mod:`runner.power`). It prints only; nothing is written.
"""

from __future__ import annotations

import argparse
import json
import sys
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from seedsweep.agents.base import ConfigError
from seedsweep.runner.analysis import power
from seedsweep.runner.analysis import report
from seedsweep.runner.analysis import scores
from seedsweep.runner.analysis import stats
from seedsweep.runner.commands.options import OneLineParser as _Parser
from seedsweep.runner.analysis.scores import RANDOM_AGENT

VERDICTS = ("better", "worse", "insufficient evidence")
VERDICT_RULE = (
    "better: the interval of P(candidate > baseline) lies entirely above 0.5 (low > 0.5) AND "
    "the interval of the IQM difference (candidate - baseline, normalised scores) lies "
    "entirely above 0 (low > 0); worse: P interval entirely below 0.5 (high < 0.5) AND "
    "IQM-difference interval entirely below 0 (high < 0); otherwise insufficient evidence. "
    "An interval with an endpoint equal to 0.5 (or 0) includes it."
)
COMPARE_FILE = "compare.json"


def _common(p: argparse.ArgumentParser) -> None:
    p.add_argument("sweep", help="the sweep folder, e.g. results/<sweep>")
    p.add_argument("--candidate", required=True, help="the agent under test")
    p.add_argument("--baseline", action="append", default=None,
                   help="a baseline agent (repeat, or comma-separate)")
    p.add_argument("--envs", help="comma-separated envs (gymnasium ids or env config names)")
    p.add_argument("--score", default="final", choices=scores.SCORE_METHODS,
                   help="run score: last evaluation, mean of the last K, or area under curve")
    p.add_argument("--last-k", type=int, default=3, help="K for --score last-k (default 3)")
    p.add_argument("--resamples", type=int, default=2000, help="bootstrap resamples (2000)")
    p.add_argument("--seed", type=int, default=0, help="bootstrap seed (0)")
    p.add_argument("--quiet", action="store_true", help="no terminal table")


def build_compare_parser() -> argparse.ArgumentParser:
    p = _Parser("compare", prog="seedsweep compare",
                description="Compare a candidate agent with baselines, with a verdict each.")
    _common(p)
    p.add_argument("--confidence", type=float, default=0.95, help="interval level (0.95)")
    p.add_argument("--allow-few", action="store_true",
                   help="compare agent-env cells with a single complete run")
    p.add_argument("--random-episodes", type=int, default=None,
                   help="episodes when the random score must be measured (default: max(100, "
                   "eval.episodes))")
    return p


def parse_compare_options(argv: Sequence[str]) -> argparse.Namespace:
    opts = build_compare_parser().parse_args(list(argv))
    report.check_statistics_options(opts)
    return opts


# -- agent names ----------------------------------------------------------------------------


def _names(sweep: scores.Sweep) -> tuple[list[str], dict[str, list[str]], list[str]]:
    """(labels of complete runs, agent name -> its labels, every name the sweep knows)."""
    labels = sorted({r.label for r in sweep.runs})
    base: dict[str, list[str]] = {}
    for r in sweep.runs:
        base.setdefault(r.agent, [])
        if r.label not in base[r.agent]:
            base[r.agent].append(r.label)
    known = sorted(set(labels) | set(base) | {p.agent for p in sweep.problems if p.agent != "?"})
    return labels, base, known


def resolve_agent(sweep: scores.Sweep, name: str, field_name: str) -> list[str]:
    """The agent labels ``name`` stands for: itself, or every variant of an agent name."""
    labels, base, known = _names(sweep)
    if name in labels:
        return [name]
    if name in base:
        return sorted(base[name])
    if name in known:
        return [name]  # only runs that are not complete: check_cells says so
    raise ConfigError(field_name, f"unknown agent {name!r} (in this sweep: {', '.join(known)})")


def select_pair_agents(sweep: scores.Sweep, candidate: str,
                       baselines: Sequence[str] | None) -> tuple[str, list[str]]:
    """The candidate label and the baseline labels (default: all others but random)."""
    found = resolve_agent(sweep, candidate, "--candidate")
    if len(found) > 1:
        raise ConfigError("--candidate", f"{candidate!r} names {len(found)} variants in this "
                          f"sweep ({', '.join(found)}); name one")
    cand = found[0]
    chosen: list[str] = []
    if baselines:
        for text in baselines:
            for name in report.split_names(text):
                for label in resolve_agent(sweep, name, "--baseline"):
                    if label == cand:
                        raise ConfigError("--baseline", f"{label!r} is the candidate; name "
                                          "other agents")
                    if label not in chosen:
                        chosen.append(label)
        if not chosen:
            raise ConfigError("--baseline", "no agent named")
        return cand, chosen
    labels, _, _ = _names(sweep)
    random_labels = {r.label for r in sweep.runs if r.agent == RANDOM_AGENT}
    chosen = [lab for lab in labels if lab != cand and lab not in random_labels]
    if not chosen:
        others = [lab for lab in labels if lab != cand]
        hint = f" (available: {', '.join(others)})" if others else ""
        raise ConfigError("--baseline", "the sweep has no other agent than the candidate and "
                          f"the random agent; name a baseline with --baseline{hint}")
    return cand, chosen


# -- statistics -----------------------------------------------------------------------------


def _rng(seed: int, purpose: str, *names: str) -> np.random.Generator:
    return report._rng(seed, purpose, *names)


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
                                          _rng(seed, purpose, first, second, *extra))
    return stats.Interval(1.0 - iv.point, 1.0 - iv.high, 1.0 - iv.low) if flipped else iv


def pair_difference(cand: str, base: str, cand_strata: stats.Strata,
                    base_strata: stats.Strata, resamples: int, confidence: float,
                    seed: int) -> stats.Interval:
    first, second, flipped = _pair(cand, base)
    x, y = (base_strata, cand_strata) if flipped else (cand_strata, base_strata)
    iv = iqm_difference(x, y, resamples, confidence, _rng(seed, "iqm_difference", first, second))
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
                                          _rng(seed, "per_env", agent, env))
            cells[role] = {**iv.as_dict(), "n_seeds": int(values.size)}
        env_p = pair_improvement(cand, base, [norm[cand][j]], [norm[base][j]], resamples,
                                 confidence, seed, "improvement_env", env)
        per_env[env] = {"raw_iqm": cells, "probability_of_improvement": env_p.as_dict()}
    aggregate = {a: stats.aggregate_intervals(norm[a], resamples, confidence,
                                              _rng(seed, "aggregate", a))["iqm"].as_dict()
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


# -- the comparison document ----------------------------------------------------------------


@dataclass
class Loaded:
    """The cells of a comparison after the report's checks."""

    sweep: scores.Sweep
    candidate: str
    baselines: list[str]
    envs: list[str]
    by_cell: dict
    env_cfgs: dict
    eval_settings: dict
    problems: list[scores.Problem]


def load_cells(opts: argparse.Namespace, allow_few: bool, pilot: bool = False) -> Loaded:
    """Load and check the sweep for a candidate and its baselines (refusals as ConfigError).
    ``pilot``: the cells are pilot runs for plan-seeds, which always needs 2 per cell."""
    sweep = scores.load_sweep(Path(opts.sweep))
    cand, baselines = select_pair_agents(sweep, opts.candidate, opts.baseline)
    agents = [cand, *baselines]
    envs = report.select_envs(sweep, agents, opts.envs)
    by_cell = report.group_runs(sweep.runs, agents, envs)
    report.check_cells(by_cell, agents, envs, sweep.problems, allow_few or pilot)
    for (agent, env), runs in by_cell.items():
        if pilot and len(runs) < 2:
            raise ConfigError("runs", f"{agent} has {len(runs)} complete run on {env}; the "
                              "power analysis needs at least 2 pilot runs per agent and env")
    env_cfgs, eval_settings = report.check_settings(by_cell, agents, envs)
    names = {a.split("[")[0] for a in agents}
    problems = [p for p in sweep.problems if p.agent in names and p.env in envs]
    problems += report.missing_runs(sweep, agents, envs, by_cell)
    return Loaded(sweep, cand, baselines, envs, by_cell, env_cfgs, eval_settings, problems)


def request_of(opts: argparse.Namespace) -> dict[str, Any]:
    """What was asked, enough to recompute the comparison later (see :func:`for_report`)."""
    return {"candidate": opts.candidate, "baseline": opts.baseline, "envs": opts.envs,
            "score": opts.score, "last_k": opts.last_k, "confidence": opts.confidence,
            "resamples": opts.resamples, "seed": opts.seed, "allow_few": opts.allow_few,
            "random_episodes": opts.random_episodes}


def compute_comparison(opts: argparse.Namespace, runner: Any = None) -> dict[str, Any]:
    """The compare.json document; raises ConfigError on bad input and writes nothing but
    the random-score cache (as the report does)."""
    cells = load_cells(opts, opts.allow_few)
    agents = [cells.candidate, *cells.baselines]
    compared = [r for a in agents for e in cells.envs for r in cells.by_cell[(a, e)]]
    raw_score = {r.run_id: scores.score_run(r, opts.score, opts.last_k) for r in compared}
    targets = {e: scores.reference_score(cells.env_cfgs[e]) for e in cells.envs}
    references = {}
    for env in cells.envs:
        randoms, excluded = report.matching_random_runs(
            cells.sweep.runs, env, cells.env_cfgs[env], cells.eval_settings[env])
        cells.problems += excluded
        references[env] = report.make_reference(
            Path(opts.sweep).parent, cells.env_cfgs[env], cells.eval_settings[env],
            targets[env], randoms, opts, runner)
    raw = {a: [np.array([raw_score[r.run_id] for r in cells.by_cell[(a, e)]])
               for e in cells.envs] for a in agents}
    norm = {a: [np.asarray(references[e].normalise(v), dtype=float)
                for e, v in zip(cells.envs, raw[a], strict=True)] for a in agents}
    comparisons = [compare_pair(cells.candidate, b, cells.envs, norm, raw, opts.resamples,
                                opts.confidence, opts.seed) for b in cells.baselines]
    return {
        "sweep": cells.sweep.name,
        "candidate": cells.candidate,
        "baselines": cells.baselines,
        "envs": cells.envs,
        "verdict_rule": VERDICT_RULE,
        "comparisons": comparisons,
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


def dumps(doc: dict[str, Any]) -> str:
    return json.dumps(doc, indent=2, default=report._json) + "\n"


def write_comparison(doc: dict[str, Any], sweep_dir: Path) -> Path:
    """compare.json into the report folder (made if missing), and the Comparison section of
    report.html replaced when the page exists. Each file is replaced atomically."""
    from seedsweep.runner.present import html as html_report
    from seedsweep.runner.execution.records import atomic_write_text

    check_output_folder(sweep_dir)
    folder = Path(sweep_dir) / "report"
    target = folder / COMPARE_FILE
    atomic_write_text(target, dumps(doc))
    page = folder / "report.html"
    if page.is_file():
        section = html_report.comparison_section(doc)
        atomic_write_text(page, html_report.splice_comparison(page.read_text(), section))
    return target


def check_output_folder(sweep_dir: Path) -> None:
    folder = Path(sweep_dir) / "report"
    if folder.exists() and not folder.is_dir():
        raise ConfigError("sweep", f"{folder} exists and is not a folder")


# -- the report's copy of the comparison -----------------------------------------------------


@dataclass
class ReportComparison:
    """What ``seedsweep report`` puts into the new report folder: compare.json's text, its
    parsed content for the page, and a note when it could not be recomputed."""

    text: str
    doc: dict[str, Any] | None
    note: str = ""


def _argv_of(request: dict[str, Any], sweep: str) -> list[str]:
    argv = [sweep, "--candidate", str(request["candidate"])]
    for b in request.get("baseline") or []:
        argv += ["--baseline", str(b)]
    if request.get("envs"):
        argv += ["--envs", str(request["envs"])]
    for key in ("score", "last_k", "confidence", "resamples", "seed", "random_episodes"):
        if request.get(key) is not None:
            argv += ["--" + key.replace("_", "-"), str(request[key])]
    if request.get("allow_few"):
        argv.append("--allow-few")
    return argv


def for_report(opts: argparse.Namespace, runner: Any = None) -> ReportComparison | None:
    """The comparison a new report carries. With ``--candidate``: computed with the report's
    options (refusals refuse the report). Else, when the report folder has a compare.json:
    recomputed from its recorded request; if that is refused, the old file is kept as it is
    and the page says why it was not refreshed."""
    if getattr(opts, "candidate", None):
        doc = compute_comparison(argparse.Namespace(**{**vars(opts), "quiet": True}), runner)
        return ReportComparison(dumps(doc), doc)
    if getattr(opts, "baseline", None):
        raise ConfigError("--baseline", "needs --candidate")
    old = Path(opts.sweep) / "report" / COMPARE_FILE
    if not old.is_file():
        return None
    text, previous = "", None
    try:
        text = old.read_bytes().decode("utf-8", errors="replace")
        previous = json.loads(text)
        copts = parse_compare_options(_argv_of(previous["request"], str(opts.sweep)))
        doc = compute_comparison(copts, runner)
    except (ConfigError, OSError, ValueError, KeyError, TypeError) as err:
        why = str(err) if isinstance(err, ConfigError) else f"{type(err).__name__}: {err}"
        return ReportComparison(text, previous if isinstance(previous, dict) else None,
                                f"compare.json was kept as it was: recomputing it was "
                                f"refused ({why}); run seedsweep compare again")
    return ReportComparison(dumps(doc), doc)


# -- terminal output ------------------------------------------------------------------------


def print_comparison(doc: dict[str, Any], target: Path) -> None:
    from rich.console import Console
    from rich.table import Table
    from rich.text import Text  # titles and headers as Text: agent labels contain [...]

    console = Console(file=sys.stdout, width=140)
    conf = doc["bootstrap"]["confidence"]
    table = Table(title=Text(f"{doc['candidate']} vs baselines on {len(doc['envs'])} envs "
                             f"({conf:.0%} stratified bootstrap intervals, normalised scores)"))
    for col in ("baseline", "IQM difference", "P(candidate > baseline)", "verdict"):
        table.add_column(col)
    for c in doc["comparisons"]:
        table.add_row(c["baseline"], _iv(c["iqm_difference"]),
                      _iv(c["probability_of_improvement"]), c["verdict"])
    console.print(table, markup=False)
    envs = Table(title=Text("per env: IQM of raw scores over seeds [interval] (seeds)"))
    for col in ("env", "baseline", doc["candidate"], "baseline score", "P(cand > base)"):
        envs.add_column(Text(col))
    for c in doc["comparisons"]:
        for env, cell in c["per_env"].items():
            cand, base = cell["raw_iqm"]["candidate"], cell["raw_iqm"]["baseline"]
            envs.add_row(env, c["baseline"], f"{_raw_iv(cand)} ({cand['n_seeds']})",
                         f"{_raw_iv(base)} ({base['n_seeds']})",
                         _iv(cell["probability_of_improvement"]))
    console.print(envs, markup=False)
    for c in doc["comparisons"]:
        console.print(f"vs {c['baseline']}: {c['verdict']}: {c['reason']}", markup=False)
    if doc["excluded_runs"]:
        console.print(f"{len(doc['excluded_runs'])} run(s) left out; listed in compare.json.",
                      markup=False)
    console.print(f"comparison: {target}", markup=False)


def _iv(d: dict[str, float]) -> str:
    return f"{d['point']:.3f} [{d['low']:.3f}, {d['high']:.3f}]"


def _raw_iv(d: dict[str, float]) -> str:
    """Raw scores have any scale: 4 significant digits."""
    return f"{d['point']:.4g} [{d['low']:.4g}, {d['high']:.4g}]"


def compare_main(argv: list[str]) -> int:
    """``seedsweep compare results/<sweep> --candidate NAME [options]``; the exit status."""
    try:
        opts = parse_compare_options(argv)
        check_output_folder(Path(opts.sweep))
        doc = compute_comparison(opts)
        target = write_comparison(doc, Path(opts.sweep))
    except ConfigError as err:
        print(f"seedsweep: error: {err}", file=sys.stderr)
        return 2
    if not opts.quiet:
        print_comparison(doc, target)
    return 0


# -- plan-seeds -----------------------------------------------------------------------------


def build_plan_parser() -> argparse.ArgumentParser:
    p = _Parser("plan-seeds", prog="seedsweep plan-seeds",
                description="Seeds per agent needed to detect a difference, from pilot runs "
                "(bootstrap power analysis of Welch's t-test, Colas et al. 2018).")
    _common(p)
    p.add_argument("--difference", action="append", default=None, metavar="D or ENV=D",
                   help="difference in mean score to detect (candidate - baseline, raw score "
                   "units); ENV=D for one env (default: the observed difference)")
    p.add_argument("--power", type=float, default=0.8, help="target power (0.8)")
    p.add_argument("--alpha", type=float, default=0.05, help="test level (0.05)")
    p.add_argument("--max-seeds", type=int, default=100, help="largest seed count tried (100)")
    p.add_argument("--alternative", default="two-sided", choices=power.ALTERNATIVES,
                   help="two-sided test, or one-sided in the direction of the difference")
    p.add_argument("--json", action="store_true", help="print the plan as JSON")
    return p


def parse_plan_options(argv: Sequence[str]) -> argparse.Namespace:
    opts = build_plan_parser().parse_args(list(argv))
    report.check_resampling_options(opts)
    if not 0.0 < opts.power < 1.0:
        raise ConfigError("--power", f"must be in (0, 1) (got {opts.power})")
    if not 0.0 < opts.alpha < 1.0:
        raise ConfigError("--alpha", f"must be in (0, 1) (got {opts.alpha})")
    if not 2 <= opts.max_seeds <= power.MAX_SEEDS_LIMIT:
        raise ConfigError("--max-seeds", f"must be in [2, {power.MAX_SEEDS_LIMIT}] "
                          f"(got {opts.max_seeds})")
    return opts


def parse_differences(items: Sequence[str] | None, envs: Sequence[str],
                      sweep: scores.Sweep) -> dict[str, float]:
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
            rng = _rng(opts.seed, "plan_seeds", cells.candidate, base, env)
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


def print_plan(doc: dict[str, Any]) -> None:
    from rich.console import Console
    from rich.table import Table
    from rich.text import Text

    console = Console(file=sys.stdout, width=140)
    side = "two-sided" if doc["alternative"] == "two-sided" else "one-sided"
    table = Table(title=f"seeds per agent for power {doc['power']} at alpha {doc['alpha']} "
                  f"({side} Welch t-test, {doc['resamples']} bootstrap resamples per n)")
    for col in ("env", "baseline", "pilot seeds", f"mean {doc['candidate']}", "mean baseline",
                "difference D", "seeds per agent", "power there"):
        table.add_column(Text(col))
    for p in doc["plans"]:
        source = "" if p["difference_source"] == "--difference" else " (observed)"
        table.add_row(p["env"], p["baseline"], f"{p['pilot_seeds'][0]}, {p['pilot_seeds'][1]}",
                      f"{p['candidate_mean']:.4g}", f"{p['baseline_mean']:.4g}",
                      f"{p['difference']:.4g}{source}", p["seeds_label"],
                      f"{p['power_at_seeds']:.3f}")
    console.print(table, markup=False)
    console.print("Pilot samples stand in for the score distributions: with few pilot runs "
                  "the estimate is rough; rerun it as seeds accumulate.", markup=False)


def plan_seeds_main(argv: list[str]) -> int:
    """``seedsweep plan-seeds results/<sweep> --candidate A --baseline B [options]``."""
    try:
        opts = parse_plan_options(argv)
        doc = plan_seeds(opts)
    except ConfigError as err:
        print(f"seedsweep: error: {err}", file=sys.stderr)
        return 2
    if opts.json:
        print(json.dumps(doc, indent=2))
    elif not opts.quiet:
        print_plan(doc)
    return 0
