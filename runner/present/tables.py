"""Terminal tables of the report, the comparison and the seed plan (rich, on stdout)."""

from __future__ import annotations

import sys
from pathlib import Path
from typing import Any

from rich.console import Console
from rich.table import Table
from rich.text import Text  # titles and headers as Text: agent labels contain [...]
from seedsweep.runner.analysis import stats
from seedsweep.runner.analysis.coverage import coverage_note
from seedsweep.runner.analysis.report import ReportData


def print_summary(data: ReportData, target: Path, comparison: Any = None) -> None:
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
    seeds = min((n for a in data.agents for _, n in data.per_env.get(a, {}).values()), default=0)
    note = coverage_note(seeds, len(data.envs), confidence=data.options["confidence"])
    if note:
        console.print(note, markup=False)
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


def print_comparison(doc: dict[str, Any], target: Path) -> None:
    """The verdicts first, then what they rest on: one row per baseline, then per env."""
    console = Console(file=sys.stdout, width=120)
    conf = doc["bootstrap"]["confidence"]
    table = Table(title=Text(f"{doc['candidate']} vs baselines on {len(doc['envs'])} env(s): "
                             f"verdicts at alpha {doc['alpha']} (normalised scores)"))
    for col in ("baseline", "verdict", "p (adjusted)", "IQM difference",
                f"P(candidate > baseline), {conf:.0%} CI"):
        table.add_column(Text(col), justify="left" if col in ("baseline", "verdict")
                         else "right")
    for c in doc["comparisons"]:
        table.add_row(c["baseline"], c["verdict"], f"{c['p_adjusted']:.3g}",
                      _iv(c["iqm_difference"]), _iv(c["probability_of_improvement"]))
    console.print(table, markup=False)
    envs = Table(title=Text(f"per env: IQM of raw scores over seeds, {conf:.0%} CI (seeds)"))
    for col in ("env", "baseline", doc["candidate"], "baseline score", "P(cand > base)"):
        envs.add_column(Text(col), justify="left" if col in ("env", "baseline") else "right")
    for c in doc["comparisons"]:
        for env, cell in c["per_env"].items():
            cand, base = cell["raw_iqm"]["candidate"], cell["raw_iqm"]["baseline"]
            envs.add_row(env, c["baseline"], f"{_raw_iv(cand)} ({cand['n_seeds']})",
                         f"{_raw_iv(base)} ({base['n_seeds']})",
                         _iv(cell["probability_of_improvement"]))
    console.print(envs, markup=False)
    for c in doc["comparisons"]:
        console.print(f"vs {c['baseline']}: {c['verdict']}: {c['reason']}", markup=False)
        console.print(f"  evidence: {c['evidence']}", markup=False)
    if doc["excluded_runs"]:
        console.print(f"{len(doc['excluded_runs'])} run(s) left out; listed in compare.json.",
                      markup=False)
    console.print(f"comparison: {target}", markup=False)


def _iv(d: dict[str, float]) -> str:
    return f"{d['point']:.3f} [{d['low']:.3f}, {d['high']:.3f}]"



def _raw_iv(d: dict[str, float]) -> str:
    """Raw scores have any scale: 4 significant digits."""
    return f"{d['point']:.4g} [{d['low']:.4g}, {d['high']:.4g}]"



def print_plan(doc: dict[str, Any]) -> None:
    console = Console(file=sys.stdout, width=120)
    diff = ", ".join(f"{e} {d:g}" for e, d in doc["difference"].items())
    table = Table(title=Text(f"seeds per agent per env for power {doc['power']} at alpha "
                             f"{doc['planned_level']:.3g} (the verdict's permutation test; "
                             f"difference {diff} {doc['units']})"))
    for col in ("baseline", "plan", "power there", "at the pilot SD",
                f"if the SD is at its {doc['sd_level']:.0%} upper bound", "pilot seeds"):
        table.add_column(Text(col), justify="left" if col == "baseline" else "right")
    for p in doc["plans"]:
        pilots = "; ".join(f"{e}: {a}, {b}" for e, (a, b) in p["pilot_seeds"].items())
        table.add_row(p["baseline"], p["seeds_label"], f"{p['power_at_seeds']:.2f}",
                      p["seeds_at_pilot_sd"], p["seeds_if_sd_high"], pilots)
    console.print(table, markup=False)
    console.print("The plan averages the power over the spreads the few pilot runs allow; the "
                  "last column shows how many seeds it would take if the true spread were "
                  "at the pilots' upper bound. Rerun it as seeds accumulate.", markup=False)
