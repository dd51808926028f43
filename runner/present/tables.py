"""Terminal tables of the report, the comparison and the seed plan (rich, on stdout)."""

from __future__ import annotations

import sys
from pathlib import Path
from typing import Any

from rich.console import Console
from rich.table import Table
from rich.text import Text  # titles and headers as Text: agent labels contain [...]
from seedsweep.runner.analysis import stats
from seedsweep.runner.analysis.report import ReportData
from seedsweep.runner.analysis.tuning import budget_text


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
    if any(data.tuning.values()):
        for a in data.agents:
            console.print(f"{a}: {budget_text(data.tuning.get(a))}", markup=False)
    for t in data.sensitivity:
        print_sensitivity(console, t)
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
        if comparison.doc.get("tuning_note"):
            console.print(f"warning: {comparison.doc['tuning_note']}", markup=False)
    if comparison is not None and comparison.note:
        console.print(comparison.note, markup=False)
    console.print(f"report: {target}", markup=False)


def print_sensitivity(console: Console, t: Any) -> None:
    """One swept key: IQM of normalised scores [interval] and runs at each value."""
    table = Table(title=Text(f"sensitivity of {t.title}: IQM of normalised scores"))
    for col in (t.key, "IQM [interval]", "runs"):
        table.add_column(Text(col))
    for r in t.rows:
        table.add_row(r.text, _fmt_iv(r.iqm), str(r.n_runs))
    console.print(table, markup=False)


def _fmt_iv(iv: stats.Interval) -> str:
    return f"{iv.point:.3f} [{iv.low:.3f}, {iv.high:.3f}]"


def print_comparison(doc: dict[str, Any], target: Path) -> None:
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
    for agent, tuned in (doc.get("tuning") or {}).items():
        console.print(f"{agent}: {budget_text(tuned)}", markup=False)
    if doc.get("tuning_note"):
        console.print(f"warning: {doc['tuning_note']}", markup=False)
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



def print_tuning(doc: dict[str, Any], agents: list[str], chosen: dict[str, Path]) -> None:
    """The study's result per agent: trials complete of the budget, best objective, the
    chosen values and where the chosen YAML is."""
    console = Console(file=sys.stdout, width=140)
    b = doc["budget"]
    table = Table(title=Text(f"study {doc['study']}: {b['trials']} trials × {b['steps']} steps "
                             f"× {len(b['envs'])} envs ({', '.join(b['envs'])}) × "
                             f"{b['seeds_per_env']} tuning seeds per agent; objective: IQM "
                             "of normalised final scores"))
    for col in ("agent", "complete", "failed", "best objective", "best trial", "chosen values"):
        table.add_column(Text(col))
    for name, s in doc["summary"].items():
        best = s["best"]
        values = ", ".join(f"{k}={_value(v)}" for k, v in (best or {}).get("values", {}).items())
        table.add_row(name, f"{s['complete']}/{s['trials']}", str(s["failed"]),
                      "-" if best is None else f"{best['objective']:.4f}",
                      "-" if best is None else str(best["trial"]), values or "-")
    console.print(table, markup=False)
    for name in agents:
        if name in chosen:
            console.print(f"{name}: chosen configuration in {chosen[name]}", markup=False)


def _value(v: Any) -> str:
    return f"{v:.4g}" if isinstance(v, float) else str(v)
