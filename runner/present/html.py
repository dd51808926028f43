"""report.html: one self-contained page (figures embedded as base64 PNG, no external files).

Every string that comes from run folders or the command line (agent, env and run names,
error messages, provenance) goes through :func:`html.escape`.
"""

from __future__ import annotations

import base64
import html
import json
from collections import Counter
from collections.abc import Iterable, Sequence
from typing import Any

from seedsweep.runner.analysis.stats import STATISTICS
from seedsweep.runner.analysis.tuning import budget_text

STYLE = """
body{font-family:system-ui,sans-serif;margin:2em auto;max-width:1100px;color:#222}
table{border-collapse:collapse;margin:.5em 0 1.5em}
th,td{border:1px solid #ccc;padding:.25em .6em;text-align:right;font-size:.9em}
th{background:#f3f3f3} td.l,th.l{text-align:left}
img{max-width:100%;border:1px solid #eee;margin:.5em 0}
.bad{color:#a00} code{background:#f5f5f5;padding:0 .2em}
"""
STAT_NAMES = {"iqm": "IQM", "mean": "Mean", "median": "Median",
              "optimality_gap": "Optimality gap"}


def esc(value: Any) -> str:
    return html.escape(str(value), quote=True)


def _is_number(cell: Any) -> bool:
    text = str(cell).split(" ")[0]
    try:
        float(text)
    except ValueError:
        return False
    return True


def _table(header: Sequence[str], rows: Iterable[Sequence[Any]], left: int = 1) -> str:
    """A table; the first ``left`` columns and every non-numeric cell are left-aligned;
    every cell is escaped."""
    rows = [list(r) for r in rows]

    def cls(i: int, cell: Any) -> str:
        return "l" if i < left or not _is_number(cell) else ""

    head = "".join(f"<th class='{'l' if i < left else ''}'>{esc(h)}</th>"
                   for i, h in enumerate(header))
    body = "".join(
        "<tr>" + "".join(f"<td class='{cls(i, c)}'>{esc(c)}</td>" for i, c in enumerate(row))
        + "</tr>"
        for row in rows)
    return f"<table><tr>{head}</tr>{body}</table>"


def _iv(d: dict[str, float]) -> str:
    return f"{d['point']:.3f} [{d['low']:.3f}, {d['high']:.3f}]"


def _figure(figures: dict[str, tuple[bytes, bytes]], name: str, alt: str) -> str:
    if name not in figures:
        return "<p><em>figures were not made (--no-figures)</em></p>"
    data = base64.b64encode(figures[name][0]).decode("ascii")
    return f"<img alt='{esc(alt)}' src='data:image/png;base64,{data}'>"


def render(data: Any, summary: dict[str, Any], figures: dict[str, tuple[bytes, bytes]],
           comparison: Any = None) -> str:
    """The whole page as a string. ``comparison``: a :class:`runner.compare.ReportComparison`
    or None; its section sits between markers so ``seedsweep compare`` can replace it."""
    conf = f"{summary['bootstrap']['confidence']:.0%}"
    parts = [
        "<!DOCTYPE html><html lang='en'><head><meta charset='utf-8'>",
        f"<title>seedsweep report: {esc(data.sweep.name)}</title><style>{STYLE}</style>",
        "</head><body>",
        f"<h1>Sweep <code>{esc(data.sweep.name)}</code></h1>",
        f"<p>Folder: <code>{esc(data.sweep.path)}</code>. {len(data.agents)} compared agents, "
        f"{len(data.envs)} envs, {len(data.runs)} complete runs used, "
        f"<span class='{'bad' if data.problems else ''}'>{len(data.problems)} left out</span>."
        "</p>",
        _protocol(data, summary),
        f"<h2>Aggregate normalised scores ({esc(conf)} intervals)</h2>",
        _table(["agent", "runs"] + [STAT_NAMES[s] for s in STATISTICS],
               [[a, summary["agents"][a]["n_runs"]]
                + [_iv(summary["agents"][a][s]) for s in STATISTICS] for a in data.agents]),
        _figure(figures, "aggregate_intervals", "aggregate intervals per agent"),
        tuning_section(summary, figures),
        "<h2>Probability of improvement</h2>",
        "<p>P(X &gt; Y): the probability that a run of X on a random env scores higher than a "
        "run of Y (Mann-Whitney U / (n m) per env, ties count 1/2, averaged over envs).</p>",
        _table(["X", "Y", "P(X > Y)"],
               [[p["x"], p["y"], _iv(p)] for p in summary["probability_of_improvement"]], 2),
        _figure(figures, "probability_of_improvement", "probability of improvement"),
        comparison_section(comparison.doc, comparison.note) if comparison is not None
        else comparison_section(None),
        "<h2>Performance profiles</h2>",
        _figure(figures, "performance_profiles", "performance profiles"),
        "<h2>Sample efficiency</h2>",
        f"<p>IQM of normalised scores over all runs and envs at each evaluation; x axis: "
        f"{esc(data.efficiency_x)}.</p>",
        _figure(figures, "sample_efficiency", "sample-efficiency curves"),
        "<h2>References per env</h2>",
        _references(data),
        "<h2>Per-env raw scores (IQM over seeds)</h2>",
        _per_env(data, summary),
        _figure(figures, "learning_curves", "per-env learning curves"),
        "<h2>Runs left out</h2>",
        _problems(data),
        "<h2>Provenance of the runs</h2>",
        _provenance(data),
        "<h2>Timing</h2>",
        _table(["step", "seconds"], sorted(data.timing.items())),
        "</body></html>",
    ]
    return "\n".join(parts) + "\n"


def _protocol(data: Any, summary: dict[str, Any]) -> str:
    b, s = summary["bootstrap"], summary["score"]
    method = {"final": "mean undiscounted return of the last evaluation",
              "last-k": f"mean of the last {s['last_k']} evaluations' mean returns",
              "auc": "area under the evaluation curve divided by its span of env steps"}
    rows = [
        ["run score", method[s["method"]]],
        ["normalised score", s["normalisation"]],
        ["random score", "the random agent under the same evaluation protocol: its runs in "
         "the sweep, or measured into <results>/_reference_cache/ (mean over episodes, "
         "Student-t interval)"],
        ["reference", "env.reference if set; else the exact oracle optimum for tabular envs; "
         "else the gymnasium spec's reward_threshold"],
        ["oracle", summary["oracle_protocol"]],
        ["aggregates", "IQM: mean of the middle 50% of all runs pooled over envs; mean and "
         "median: of per-env means; optimality gap: mean of max(1 - x, 0) (per env, averaged)"],
        ["intervals", f"stratified bootstrap (strata = envs), percentile, {b['resamples']} "
         f"resamples, confidence {b['confidence']}, seed {b['seed']}"],
        ["method reference", "Agarwal et al. 2021, Deep Reinforcement Learning at the Edge of "
         "the Statistical Precipice (NeurIPS)"],
    ]
    for env, ev in data.eval_settings.items():
        rows.append([f"evaluation on {env}", f"{ev['episodes']} episodes per evaluation, "
                     f"deterministic={str(ev['deterministic']).lower()}"])
    return "<h2>Protocol</h2>" + _table(["setting", "value"], rows, 2)


def _references(data: Any) -> str:
    rows = []
    for e in data.envs:
        r = data.references[e]
        rows.append([e, r.env_config, f"{r.random:.4g}", f"[{r.random_low:.4g}, "
                     f"{r.random_high:.4g}]", r.random_episodes,
                     "sweep runs" if r.random_source == "sweep" else "measured (cache)",
                     f"{r.reference:.6g}", r.source, r.detail, r.random_note])
    return _table(["env", "config", "random", "random CI", "episodes", "random from",
                   "reference", "source", "how", "note"], rows, 2)


def _per_env(data: Any, summary: dict[str, Any]) -> str:
    header = ["agent"] + [f"{e} (seeds)" for e in data.envs]
    rows = []
    for a in data.shown:
        cells = summary["per_env"].get(a, {})
        rows.append([a] + [f"{_iv(cells[e])} ({cells[e]['n_seeds']})" if e in cells else "-"
                           for e in data.envs])
    return _table(header, rows)


def _problems(data: Any) -> str:
    if not data.problems:
        return "<p>None: every run folder is complete and used.</p>"
    rows = [[p.status, p.run_id, p.agent, p.env, p.seed, p.reason] for p in data.problems]
    return _table(["status", "run", "agent", "env", "seed", "reason"], rows, 6)


def _provenance(data: Any) -> str:
    groups: Counter[str] = Counter()
    for r in data.runs:
        groups[json.dumps(r.record.get("provenance") or {}, sort_keys=True)] += 1
    keys = ["git_commit", "git_dirty", "python", "torch", "gymnasium", "numpy", "cpu",
            "hostname"]
    rows = []
    for blob, n in groups.most_common():
        prov = json.loads(blob)
        rows.append([n] + [prov.get(k, "") for k in keys])
    return _table(["runs"] + keys, rows, 9)


# -- the Comparison section (written by the report, replaced by ``seedsweep compare``) -------

COMPARISON_START = "<!-- seedsweep:comparison:start -->"
COMPARISON_END = "<!-- seedsweep:comparison:end -->"


def comparison_section(doc: dict[str, Any] | None, note: str = "") -> str:
    """The Comparison section between its markers (only the markers when there is none)."""
    if doc is None and not note:
        return COMPARISON_START + COMPARISON_END
    parts = [COMPARISON_START, "<h2>Comparison</h2>"]
    if note:
        parts.append(f"<p class='bad'>{esc(note)}</p>")
    if doc is not None:
        parts.append(_comparison_body(doc))
    parts.append(COMPARISON_END)
    return "\n".join(parts)


def _comparison_body(doc: dict[str, Any]) -> str:
    b = doc["bootstrap"]
    cand = doc["candidate"]
    rows = [[c["baseline"], _iv(c["iqm_difference"]), _iv(c["probability_of_improvement"]),
             c["verdict"], c["reason"]] for c in doc["comparisons"]]
    env_rows = []
    for c in doc["comparisons"]:
        for env, cell in c["per_env"].items():
            x, y = cell["raw_iqm"]["candidate"], cell["raw_iqm"]["baseline"]
            env_rows.append([env, c["baseline"], f"{_raw(x)} ({x['n_seeds']})",
                             f"{_raw(y)} ({y['n_seeds']})",
                             _iv(cell["probability_of_improvement"])])
    return "\n".join([
        f"<p>Candidate <code>{esc(cand)}</code> against {len(doc['comparisons'])} baseline(s) "
        f"on {len(doc['envs'])} env(s); {esc(b['confidence'])} stratified bootstrap intervals "
        f"({esc(b['resamples'])} resamples, seed {esc(b['seed'])}). IQM difference: IQM of "
        "normalised scores pooled over envs, candidate minus baseline. From "
        "<code>report/compare.json</code>.</p>",
        f"<p>Verdict rule: {esc(doc['verdict_rule'])}</p>",
        _table(["baseline", "IQM difference", f"P({cand} > baseline)", "verdict", "why"],
               rows, 1),
        tuning_section({"tuning_note": doc.get("tuning_note")}, {}),
        "<h3>Per env: IQM of raw scores over seeds (seeds)</h3>",
        _table(["env", "baseline", cand, "baseline score", f"P({cand} > baseline)"],
               env_rows, 2),
    ])


def tuning_section(summary: dict[str, Any], figures: dict[str, tuple[bytes, bytes]]) -> str:
    """Tuning as an HTML fragment: per agent its tuning budget ("tuned: T trials × S steps × E
    envs" or "not tuned"), a comparison's ``tuning_note`` as a warning, and the sensitivity
    tables and figure of every swept key. Empty when there is nothing to say."""
    parts = []
    agents = summary.get("agents") or {}
    if agents:
        parts += ["<h2>Tuning</h2>", _table(["agent", "tuning"], [
            [a, budget_text(s.get("tuning"))] for a, s in agents.items()])]
    if summary.get("tuning_note"):
        parts.append(f"<p class='bad'><strong>Warning:</strong> {esc(summary['tuning_note'])}"
                     "</p>")
    tables = summary.get("sensitivity") or []
    if tables:
        parts.append("<h2>Sensitivity</h2><p>Per swept key: the IQM of normalised scores over "
                     "the runs at each value (pooled over envs and seeds), its stratified "
                     "bootstrap interval, and the run count. Tuning trials vary every searched "
                     "key at once: their tables are marginal (the other keys vary).</p>")
        for t in tables:
            fixed = ",".join(f"{k}={v}" for k, v in t["fixed"].items())
            title = f"{t['agent']}{f' [{fixed}]' if fixed else ''}: {t['key']}" + (
                " (tuning trials: other keys vary)" if t["marginal"] else "")
            parts += [f"<h3>{esc(title)}</h3>", _table(
                [t["key"], "IQM [interval]", "runs"],
                [[json.dumps(r["value"]), _iv(r), r["n_runs"]] for r in t["rows"]])]
        parts.append(_figure(figures, "sensitivity", "score against each swept key"))
    return "\n".join(parts)


def _raw(d: dict[str, float]) -> str:
    return f"{d['point']:.4g} [{d['low']:.4g}, {d['high']:.4g}]"


def splice_comparison(page: str, section: str) -> str:
    """``page`` with its Comparison section replaced by ``section`` (inserted before
    ``</body>`` in a page made before the section existed)."""
    start, end = page.find(COMPARISON_START), page.find(COMPARISON_END)
    if start != -1 and end > start:
        return page[:start] + section + page[end + len(COMPARISON_END):]
    at = page.rfind("</body>")
    if at == -1:
        return page + section + "\n"
    return page[:at] + section + "\n" + page[at:]
