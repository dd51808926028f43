"""Baseline card: what each shipped agent reaches on each env of a card sweep, as data.

A card sweep is a plan of the tool itself (``configs/plan/card_*.yaml``: every shipped agent
on a suite, at the suite's budgets, 5-10 seeds); run it with ``seedsweep run --plan
card_classic`` (it resumes), then turn the finished folder into a card::

    .venv/bin/python benchmarks/baseline_card.py results/card_classic-v3

For every agent x env it writes a row to ``benchmarks/cards/<folder>.csv`` and the same, with
per-seed values and curves' first threshold crossings, to ``benchmarks/cards/<folder>.json``
(both atomically), and prints a markdown table for the README:

* IQM of final scores (mean return of the last evaluation) with a 95% stratified bootstrap
  interval (percentile, 10,000 resamples), and the same for the mean of the last 3 evaluations;
* every seed's final score;
* the env step at which an evaluation first reached the gymnasium spec's ``reward_threshold``,
  per seed (empty where never), and how many seeds reached it;
* the median wall time per run, the budget, the code versions of the runs;
* in the JSON, the agent settings the runs used (their resolved ``agent`` section, ``per_env``
  settings applied), so ``card_regression.py`` can tell when the shipped settings moved on.

Runs that are not complete are counted and listed, never hidden.
"""

from __future__ import annotations

import argparse
import json
import statistics
import sys
from pathlib import Path

import gymnasium as gym
import numpy as np
from seedsweep.runner.analysis import scores
from seedsweep.runner.analysis.intervals import iqm_interval
from seedsweep.runner.analysis.runs import Run, load_sweep
from seedsweep.runner.analysis.stats import keyed_rng
from seedsweep.runner.execution.records import atomic_write_json, atomic_write_text, csv_text

CARDS = Path(__file__).resolve().parent / "cards"
RESAMPLES = 10_000
COLUMNS = ("agent", "env", "steps", "seeds", "complete", "iqm_final", "iqm_final_low",
           "iqm_final_high", "iqm_last3", "iqm_last3_low", "iqm_last3_high", "threshold",
           "seeds_reaching_threshold", "median_first_step_at_threshold", "median_wall_s",
           "finals", "code_versions")


def spec_threshold(env_id: str) -> float | None:
    try:
        return gym.spec(env_id).reward_threshold
    except gym.error.Error:
        return None


def first_crossing(run: Run, threshold: float | None) -> int | None:
    if threshold is None:
        return None
    hits = np.flatnonzero(run.curve >= threshold)
    return int(run.steps[hits[0]]) if hits.size else None


def cell(label: str, env: str, runs: list[Run], problems: int) -> dict:
    runs = sorted(runs, key=lambda r: r.seed)
    finals = np.array([scores.score_run(r, "final") for r in runs])
    last3 = np.array([scores.score_run(r, "last-k", min(3, r.curve.size)) for r in runs])
    rng = keyed_rng(0, "card", label, env)
    final_iv = iqm_interval([finals], RESAMPLES, 0.95, rng, "percentile")
    last_iv = iqm_interval([last3], RESAMPLES, 0.95, rng, "percentile")
    threshold = spec_threshold(runs[0].env_id)
    crossings = [first_crossing(r, threshold) for r in runs]
    reached = [c for c in crossings if c is not None]
    return {
        "agent": label, "env": env, "env_config": runs[0].env_config,
        "steps": int(runs[0].record["steps"]), "eval": runs[0].record.get("eval"),
        "seeds": len(runs) + problems, "complete": len(runs),
        "iqm_final": final_iv.point, "iqm_final_low": final_iv.low,
        "iqm_final_high": final_iv.high,
        "iqm_last3": last_iv.point, "iqm_last3_low": last_iv.low, "iqm_last3_high": last_iv.high,
        "threshold": threshold,
        "seeds_reaching_threshold": len(reached) if threshold is not None else None,
        "median_first_step_at_threshold": statistics.median(reached) if reached else None,
        "median_wall_s": statistics.median(float(r.record.get("wall_s") or 0) for r in runs),
        "finals": [float(v) for v in finals],
        "code_versions": sorted({(r.record.get("provenance") or {}).get("code_version") or "?"
                                 for r in runs}),
        "agent_settings": _settings(runs),
        "per_seed": [{"seed": r.seed, "final": float(f), "last3": float(k),
                      "first_step_at_threshold": c, "wall_s": r.record.get("wall_s")}
                     for r, f, k, c in zip(runs, finals, last3, crossings, strict=True)],
    }


def _settings(runs: list[Run]) -> dict | None:
    """The agent section the runs share; None if they differ (a card cell of mixed settings)."""
    first = runs[0].config.get("agent")
    return first if all(r.config.get("agent") == first for r in runs) else None


def make_card(folder: Path) -> dict:
    sweep = load_sweep(folder)
    groups: dict[tuple[str, str], list[Run]] = {}
    for r in sweep.runs:
        groups.setdefault((r.label, r.env_key), []).append(r)
    missing: dict[tuple[str, str], int] = {}
    for p in sweep.problems:
        missing[(p.agent, p.env)] = missing.get((p.agent, p.env), 0) + 1
    cells = [cell(a, e, runs, missing.get((a, e), 0)) for (a, e), runs in sorted(groups.items())]
    return {"sweep": sweep.name, "cells": cells,
            "not_complete": [vars(p) for p in sweep.problems],
            "interval": f"95% stratified bootstrap (one stratum), percentile, {RESAMPLES} "
                        "resamples, keyed by agent and env",
            "iqm": "scipy.stats.trim_mean(x, 0.25): floor(n/4) cut from each end"}


def fmt(v: float | None, digits: int = 4) -> str:
    return "" if v is None else f"{v:.{digits}g}"


def markdown(card: dict) -> str:
    lines = ["| agent | env | steps | seeds | IQM final [95% CI] | IQM last 3 [95% CI] | "
             "reached threshold | median step there | wall/run |",
             "|---|---|---|---|---|---|---|---|---|"]
    for c in card["cells"]:
        reach = ("no threshold" if c["threshold"] is None
                 else f"{c['seeds_reaching_threshold']}/{c['complete']} (≥ {c['threshold']:g})")
        lines.append(
            f"| {c['agent']} | {c['env']} | {c['steps']:,} | {c['complete']}/{c['seeds']} | "
            f"{fmt(c['iqm_final'])} [{fmt(c['iqm_final_low'])}, {fmt(c['iqm_final_high'])}] | "
            f"{fmt(c['iqm_last3'])} [{fmt(c['iqm_last3_low'])}, {fmt(c['iqm_last3_high'])}] | "
            f"{reach} | {fmt(c['median_first_step_at_threshold'], 6)} | "
            f"{c['median_wall_s']:.0f} s |")
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("folders", nargs="+", type=Path, help="finished card sweep folders")
    p.add_argument("--out", type=Path, default=CARDS, help="where the card files go")
    args = p.parse_args(argv)
    for folder in args.folders:
        card = make_card(folder)
        rows = [[json.dumps(c[k]) if isinstance(c[k], list) else c[k] for k in COLUMNS]
                for c in card["cells"]]
        atomic_write_text(args.out / f"{card['sweep']}.csv", csv_text(COLUMNS, rows))
        atomic_write_json(args.out / f"{card['sweep']}.json", card)
        print(f"## {card['sweep']}\n\n{markdown(card)}\n")
        if card["not_complete"]:
            print(f"{len(card['not_complete'])} run(s) not complete; listed in the JSON.\n")
    return 0


if __name__ == "__main__":
    sys.exit(main())
