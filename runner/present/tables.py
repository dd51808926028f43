"""Terminal tables of the report, the comparison and the seed plan (rich, on stdout).

Calm by design: a plain line says what the table is, the table has one rule under its
header, and what the numbers mean (0 and 1, which way is better, what the interval is)
follows in short lines, then what to do next.
"""

from __future__ import annotations

import shutil
import sys
from pathlib import Path
from typing import Any

from rich import box
from rich.console import Console
from rich.measure import Measurement
from rich.table import Table
from rich.text import Text  # cells and headers as Text: agent labels contain [...]
from seedsweep.runner.analysis.report import ReportData
from seedsweep.runner.analysis.tuning import budget_text
from seedsweep.runner.present import text


def _console() -> Console:
    """The terminal's width when there is one; 120 columns in a pipe or file."""
    return Console(file=sys.stdout, width=shutil.get_terminal_size((120, 24)).columns,
                   highlight=False, soft_wrap=False)


def _table(*columns: tuple[str, str]) -> Table:
    table = Table(box=box.SIMPLE_HEAD, pad_edge=False, show_edge=False, header_style="bold")
    for name, justify in columns:
        table.add_column(Text(name), justify=justify)  # type: ignore[arg-type]
    return table


def _show(console: Console, table: Table) -> None:
    """Cells keep their line (an interval split over two lines is hard to read) and nothing
    is cut: headers are written over several lines, and a table wider than the terminal is
    printed at its own width (the terminal wraps the lines)."""
    for column in table.columns:
        column.no_wrap = True
    needed = Measurement.get(console, console.options.update_width(10_000), table).maximum
    width = console.width
    console.width = max(width, needed)  # print() alone never goes beyond the console's width
    try:
        console.print(table)
    finally:
        console.width = width


def _say(console: Console, line: str, style: str = "") -> None:
    """One line; the terminal wraps it (no inserted line breaks, so a command in it can be
    copied whole)."""
    console.print(Text(line, style=style), soft_wrap=True)


def print_summary(data: ReportData, target: Path, comparison: Any = None) -> None:
    console = _console()
    conf = text.ci_label(data.options["confidence"])
    shown = text.shown_statistics(len(data.envs))
    compared = sum(data.n_runs[a] for a in data.agents)
    randoms = len(data.runs) - compared
    _say(console, f"sweep {data.sweep.name}: {len(data.agents)} agents on {len(data.envs)} "
         f"env{'s' if len(data.envs) != 1 else ''}, {compared} runs"
         + (f" (and {randoms} random-agent runs)" if randoms else ""), "bold")
    _say(console, text.SCALE_NOTE)
    columns = [("agent", "left"), ("runs", "right")]
    columns += [(f"{text.STAT_LABELS[s]}\n{'lower is better, ' if s == 'optimality_gap' else ''}"
                 f"{conf}", "right") for s in shown]
    table = _table(*columns)
    flags = []
    for a in data.agents:
        cells = []
        for s in shown:
            iv = data.aggregates[a][s]
            cells.append(Text(text.interval(iv) + (" *" if text.zero_width(iv) else "")))
            if text.zero_width(iv):
                flags.append(f"* {a}, {text.STAT_LABELS[s]}: "
                             + text.no_spread_note(data.n_runs[a], len(data.envs)))
        table.add_row(Text(a), Text(str(data.n_runs[a])), *cells)
    _show(console, table)
    seeds = min((n for a in data.agents for (_, n) in data.per_env.get(a, {}).values()),
                default=0)
    for line in (text.median_note(len(data.envs)), text.GAP_NOTE,
                 f"{conf}: stratified bootstrap interval over seeds "
                 f"({data.options['resamples']} resamples)", *flags,
                 text.coverage_line(seeds, len(data.envs))):
        if line:
            _say(console, line, "dim" if not line.startswith("*") else "")
    console.print()
    refs = _table(("env", "left"), (f"random ({conf})", "right"), ("reference", "right"),
                  ("reference from", "left"))
    for e in data.envs:
        r = data.references[e]
        refs.add_row(Text(e), Text(text.random_score(r)), Text(f"{r.reference:.4g}"),
                     Text(text.SOURCES.get(r.source, r.source)))
    _show(console, refs)
    if any(data.tuning.values()):
        for a in data.agents:
            _say(console, f"{a}: {budget_text(data.tuning.get(a))}")
    for t in data.sensitivity:
        print_sensitivity(console, t)
    if data.problems:
        _say(console, f"{len(data.problems)} run(s) left out; listed in the report.")
    doc = comparison.doc if comparison is not None else None
    if doc is not None:
        console.print()
        print_verdicts(console, doc)
    if comparison is not None and comparison.note:
        _say(console, comparison.note)
    page = target / "report.html"
    _next(console, text.next_steps(str(data.sweep.path), page.resolve().as_uri(),
                                   doc["candidate"] if doc else None, data.agents,
                                   doc["comparisons"] if doc else None))


def print_sensitivity(console: Console, t: Any) -> None:
    """One swept key of one agent: the IQM of normalised scores with its interval per value."""
    _say(console, f"sensitivity of {t.title}: IQM of normalised scores over runs", "bold")
    table = _table((t.key, "right"), ("IQM, 95% CI", "right"), ("runs", "right"))
    for r in t.rows:
        table.add_row(Text(r.text), Text(text.interval(r.iqm.as_dict())), Text(str(r.n_runs)))
    _show(console, table)


def print_tuning(doc: dict[str, Any], agents: list[str], chosen: dict[str, Path]) -> None:
    """A study's result per agent: trials complete of the budget, best objective, the
    chosen values and where the chosen YAML is."""
    console = _console()
    b = doc["budget"]
    _say(console, f"study {doc['study']}: {b['trials']} trials × {b['steps']} steps × "
         f"{len(b['envs'])} envs ({', '.join(b['envs'])}) × {b['seeds_per_env']} tuning "
         "seeds per agent; objective: IQM of normalised final scores", "bold")
    table = _table(("agent", "left"), ("complete", "right"), ("failed", "right"),
                   ("best objective", "right"), ("best trial", "right"),
                   ("chosen values", "left"))
    for name, s in doc["summary"].items():
        best = s["best"]
        values = ", ".join(f"{k}={_value(v)}" for k, v in (best or {}).get("values", {}).items())
        table.add_row(Text(name), Text(f"{s['complete']}/{s['trials']}"), Text(str(s["failed"])),
                      Text("-" if best is None else f"{best['objective']:.4f}"),
                      Text("-" if best is None else str(best["trial"])), Text(values or "-"))
    _show(console, table)
    for name in agents:
        if name in chosen:
            _say(console, f"{name}: chosen configuration in {chosen[name]}")


def _value(v: Any) -> str:
    return f"{v:.4g}" if isinstance(v, float) else str(v)


def _next(console: Console, steps: list[str]) -> None:
    console.print()
    _say(console, "next:", "bold")
    for step in steps:
        _say(console, f"  {step}")


def print_comparison(doc: dict[str, Any], target: Path) -> None:
    """The verdicts first, then what they rest on: one row per baseline, then per env."""
    console = _console()
    print_verdicts(console, doc)
    _say(console, f"comparison: {target}")
    page = Path(target).parent / "report.html"
    steps = text.next_steps(str(Path(target).parent.parent), page.resolve().as_uri(),
                            doc["candidate"], [], doc["comparisons"])
    if not page.is_file():
        steps = steps[1:] + [f"make the page: seedsweep report {Path(target).parent.parent}"]
    if steps:
        _next(console, steps)


def print_verdicts(console: Console, doc: dict[str, Any]) -> None:
    """The verdict table, the per-env table and each verdict's reason and evidence."""
    conf = text.ci_label(doc["bootstrap"]["confidence"])
    cand = doc["candidate"]
    _say(console, f"{cand} vs {len(doc['comparisons'])} baseline(s) on {len(doc['envs'])} "
         f"env(s): verdicts at alpha {doc['alpha']}", "bold")
    if doc.get("tuning_note"):
        _say(console, f"warning: {doc['tuning_note']}", "bold")
    first = doc["comparisons"][0]["iqm_difference"] if doc["comparisons"] else {}
    diff_label = (f"IQM difference\n{first.get('confidence', 0):.0%} "
                  f"{first.get('method', '')} interval" if first else "IQM difference")
    table = _table(("baseline", "left"), ("verdict", "left"), ("p\n(adjusted)", "right"),
                   (diff_label, "right"), (f"P({cand} >\nbaseline)\n{conf}", "right"))
    flags = []
    for c in doc["comparisons"]:
        diff = c["iqm_difference"]
        if diff.get("zero_width"):
            flags.append(f"* vs {c['baseline']}: the IQM difference interval has no width: "
                         "every run scored the same; no spread, not certainty")
        table.add_row(Text(c["baseline"]),
                      Text(f"{text.VERDICT_SIGNS.get(c['verdict'], '')} {c['verdict']}"),
                      Text(f"{c['p_adjusted']:.3g}"),
                      Text(_signed(diff) + (" *" if diff.get("zero_width") else "")),
                      Text(text.interval(c["probability_of_improvement"])))
    _show(console, table)
    _say(console, "IQM difference: of normalised scores (0 = random, 1 = reference), "
         "candidate minus baseline", "dim")
    for line in flags:
        _say(console, line)
    console.print()
    _say(console, f"per env: IQM of raw scores over seeds ({conf}), (seeds)", "bold")
    env_flags: list[str] = []
    envs = _table(("env", "left"), ("baseline", "left"), (f"{cand}\nscore", "right"),
                  ("baseline\nscore", "right"), (f"P({cand} >\nbaseline)", "right"))
    for c in doc["comparisons"]:
        for env, cell in c["per_env"].items():
            x, y = cell["raw_iqm"]["candidate"], cell["raw_iqm"]["baseline"]
            envs.add_row(Text(env), Text(c["baseline"]),
                         Text(f"{_flagged(text.raw_interval, x, env_flags)} ({x['n_seeds']})"),
                         Text(f"{_flagged(text.raw_interval, y, env_flags)} ({y['n_seeds']})"),
                         Text(_flagged(text.interval, cell["probability_of_improvement"],
                                       env_flags)))
    _show(console, envs)
    for line in dict.fromkeys(env_flags):
        _say(console, line)
    for c in doc["comparisons"]:
        _say(console, f"vs {c['baseline']}: {c['verdict']}: {c['reason']}")
        _say(console, f"  evidence: {c['evidence']}", "dim")
    if doc["excluded_runs"]:
        _say(console, f"{len(doc['excluded_runs'])} run(s) left out; listed in compare.json.")


def _flagged(fmt: Any, iv: dict[str, float], flags: list[str]) -> str:
    """The interval, marked ``*`` (and the note added once) when it has no width."""
    if not text.zero_width(iv):
        return fmt(iv)
    note = f"* {text.ZERO_WIDTH_NOTE}"
    if note not in flags:
        flags.append(note)
    return fmt(iv) + " *"


def _signed(d: dict[str, float]) -> str:
    return f"{d['point']:+.3f} [{d['low']:.3f}, {d['high']:.3f}]"


def print_plan(doc: dict[str, Any]) -> None:
    console = _console()
    diff = ", ".join(f"{e} {d:g}" for e, d in doc["difference"].items())
    _say(console, f"seeds per agent per env for power {doc['power']} at alpha "
         f"{doc['planned_level']:.3g} (the verdict's permutation test; difference {diff} "
         f"{doc['units']})", "bold")
    table = _table(("baseline", "left"), ("plan", "right"), ("power there", "right"),
                   ("at the pilot SD", "right"),
                   (f"if the SD is at its {doc['sd_level']:.0%} upper bound", "right"),
                   ("pilot seeds", "left"))
    for p in doc["plans"]:
        pilots = "; ".join(f"{e}: {a}, {b}" for e, (a, b) in p["pilot_seeds"].items())
        table.add_row(Text(p["baseline"]), Text(str(p["seeds_label"])),
                      Text(f"{p['power_at_seeds']:.2f}"), Text(str(p["seeds_at_pilot_sd"])),
                      Text(str(p["seeds_if_sd_high"])), Text(pilots))
    _show(console, table)
    _say(console, "The plan averages the power over the spreads the few pilot runs allow; the "
         "last column shows how many seeds it would take if the true spread were at the "
         "pilots' upper bound. Rerun it as seeds accumulate.", "dim")
