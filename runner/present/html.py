"""report.html: one self-contained page (figures embedded as base64 PNG, no external files),
the verdict first, then the scores, the pairs, the curves, the per-env numbers and how they
were made. Readable from 800 px wide up: tables wrap their intervals and scroll inside their
own box if they must, never the page.
"""

from __future__ import annotations

import json
from collections import Counter
from typing import Any

from seedsweep.runner.present import text
from seedsweep.runner.present.figures import captions, colours_of
from seedsweep.runner.present.html_parts import (
    STYLE,
    Raw,
    esc,
    figure,
    interval_cell,
    notes,
    random_cell,
    swatch,
    table,
)
from seedsweep.runner.present.palette import agent_colours, is_random
from seedsweep.runner.present.verdict_html import (
    COMPARISON_END,
    COMPARISON_START,
    VERDICT_END,
    VERDICT_START,
    comparison_section,
    splice,
    verdict_block,
)

__all__ = ["COMPARISON_END", "COMPARISON_START", "VERDICT_END", "VERDICT_START", "render",
           "splice_comparison"]

PROVENANCE_KEYS = ("code_version", "git_commit", "git_dirty", "python", "torch", "gymnasium",
                   "numpy", "cpu", "hostname")
TOC = (("verdict", "Verdict"), ("scores", "Scores"), ("pairs", "Head to head"),
       ("comparison", "Comparison"), ("profiles", "Runs above a score"),
       ("training", "Over training"), ("per-env", "Per env"), ("protocol", "Protocol"),
       ("left-out", "Runs left out"), ("provenance", "Provenance"))


def render(data: Any, summary: dict[str, Any], figures: dict[str, tuple[bytes, bytes]],
           comparison: Any = None) -> str:
    """The whole page as a string. ``comparison``: a ReportComparison or None; the verdict
    block and the Comparison section sit between markers so ``seedsweep compare`` can
    replace them."""
    colours = colours_of(data)
    caps = captions(data)
    folder = str(data.sweep.path)
    doc = comparison.doc if comparison is not None else None
    note = comparison.note if comparison is not None else ""
    ranking = sorted(((a, data.aggregates[a]["iqm"]) for a in data.agents),
                     key=lambda item: -item[1].point)
    left_out = len(data.problems)
    compared = sum(data.n_runs[a] for a in data.agents)
    randoms = len(data.runs) - compared
    parts = [
        "<!DOCTYPE html><html lang='en'><head><meta charset='utf-8'>",
        "<meta name='viewport' content='width=device-width, initial-scale=1'>",
        f"<title>seedsweep report: {esc(data.sweep.name)}</title><style>{STYLE}</style>",
        "</head><body>",
        f"<h1>Sweep <code>{esc(data.sweep.name)}</code></h1>",
        f"<p class='lede'>{len(data.agents)} agents compared on {len(data.envs)} env"
        f"{'s' if len(data.envs) != 1 else ''}: {compared} runs"
        + (f" and {randoms} random-agent runs" if randoms else "") + "; "
        f"<span class='{'bad' if left_out else ''}'>{left_out} left out</span>. Folder "
        f"<code>{esc(folder)}</code>.</p>",
        verdict_block(doc, folder, note, ranking, colours),
        "<nav class='toc'>" + "".join(f"<a href='#{k}'>{esc(v)}</a>" for k, v in TOC)
        + "</nav>",
        _scores(data, summary, colours),
        figure(figures, "agent_scores", "every run's normalised score beside each agent's "
               "aggregates", caps["agent_scores"]),
        _pairs(data, summary, colours),
        figure(figures, "head_to_head", "probability of improvement for each pair of agents",
               caps["head_to_head"]),
        comparison_section(doc, folder, note, colours),
        "<section id='profiles'><h2>Runs above a score (performance profiles)</h2>",
        figure(figures, "runs_above_threshold", "share of runs above each normalised score",
               caps["runs_above_threshold"]), "</section>",
        "<section id='training'><h2>Score over training (sample efficiency)</h2>",
        figure(figures, "score_over_training", "IQM normalised score at each evaluation",
               caps["score_over_training"]), "</section>",
        _sensitivity(summary, figures, caps),
        _per_env(data, summary, colours),
        figure(figures, "curves_per_env", "per-env returns over training",
               caps["curves_per_env"]),
        _protocol(data, summary),
        _problems(data),
        _provenance(data),
        "<section id='timing'><h2>Timing</h2>",
        table(["step", "value"], text.timing_rows(data.timing)), "</section>",
        "</body></html>",
    ]
    return "\n".join(parts) + "\n"


def _scores(data: Any, summary: dict[str, Any], colours: dict[str, str]) -> str:
    conf = text.ci_label(data.options["confidence"])
    shown = text.shown_statistics(len(data.envs))
    agents = summary["agents"]
    tuned = any(agents[a].get("tuning") for a in data.agents)
    header = ["agent", "runs"] + (["tuning"] if tuned else [])
    header += [f"{text.STAT_LABELS[s]} ({conf})" if s != "optimality_gap"
               else f"optimality gap, lower is better ({conf})" for s in shown]
    rows, flags = [], []
    for a in data.agents:
        row: list[Any] = [swatch(a, colours), agents[a]["n_runs"]]
        if tuned:
            row.append(text.tuning_line(agents[a].get("tuning")))
        for s in shown:
            iv = data.aggregates[a][s]
            flag = ""
            if text.zero_width(iv):
                flag = text.no_spread_note(data.n_runs[a], len(data.envs))
                flags.append(f"{a}, {text.STAT_LABELS[s]}: {flag}")
            row.append(interval_cell(iv, flag=flag))
        rows.append(row)
    seeds = min((len(s) for a in data.agents for s in _cells(data, a)), default=0)
    return "\n".join([
        "<section id='scores'><h2>Scores</h2>",
        f"<p>{esc(text.SCALE_NOTE)}. IQM: mean of the middle half of all runs pooled over "
        f"envs; mean and median: of the per-env mean scores. {esc(conf)}: stratified "
        f"bootstrap interval over seeds ({data.options['resamples']} resamples).</p>",
        table(header, rows),
        notes([text.median_note(len(data.envs)), text.GAP_NOTE + ".", *flags,
               text.coverage_line(seeds, len(data.envs))]),
        "</section>",
    ])


def _cells(data: Any, agent: str) -> list[list[str]]:
    by_env: dict[str, list[str]] = {}
    for r in data.runs:
        if r.label == agent:
            by_env.setdefault(r.env_key, []).append(r.run_id)
    return list(by_env.values())


def _pairs(data: Any, summary: dict[str, Any], colours: dict[str, str]) -> str:
    """Each pair once, in the head-to-head figure's order (agents by IQM, best first)."""
    conf = text.ci_label(data.options["confidence"])
    order = sorted(data.agents, key=lambda a: -data.aggregates[a]["iqm"].point)
    pairs = {(p["x"], p["y"]): p for p in summary["probability_of_improvement"]}
    rows = []
    for i, x in enumerate(order):
        for y in order[i + 1:]:
            p = pairs[(x, y)]
            if p["low"] > 0.5:
                reading = f"{x} ahead"
            elif p["high"] < 0.5:
                reading = f"{y} ahead"
            else:
                reading = "no clear winner (interval includes 0.5)"
            rows.append([swatch(x, colours), swatch(y, colours), interval_cell(p), reading])
    body = (table(["agent X", "agent Y", f"P(X > Y), {conf}", "reading"], rows) if rows
            else "<p>One agent: no pair to compare.</p>")
    if any(text.zero_width(p) for p in summary["probability_of_improvement"]):
        body += notes([f"no spread: {text.ZERO_WIDTH_NOTE}."])
    return "\n".join([
        "<section id='pairs'><h2>Head to head (probability of improvement)</h2>",
        "<p>P(X &gt; Y): the probability that a run of X scores higher than a run of Y on "
        "the same env (Mann-Whitney U / (n m) per env, ties count 1/2, averaged over envs); "
        "0.5 means no difference. Each pair once; P(Y &gt; X) = 1 - P(X &gt; Y).</p>",
        body, "</section>",
    ])


def _per_env(data: Any, summary: dict[str, Any], colours: dict[str, str]) -> str:
    conf = text.ci_label(data.options["confidence"])
    ref_rows, details = [], []
    for e in data.envs:
        r = data.references[e]
        ref_rows.append([e, random_cell(r), f"{r.reference:.6g}",
                         text.SOURCES.get(r.source, r.source)])
        src = (f"{len(r.random_runs)} random runs in the sweep" if r.random_source == "sweep"
               else "measured once into results/_reference_cache/")
        details.append(f"{e} (config {r.env_config}): random from {src}, {r.random_episodes} "
                       f"episodes; reference: {r.detail}." + (f" {r.random_note}."
                                                               if r.random_note else ""))
    rows, flat = [], []
    for a in data.shown:
        cells = summary["per_env"].get(a, {})
        row: list[Any] = [swatch(a, colours)]
        for e in data.envs:
            if is_random(a, data.floor_labels):
                row.append(random_cell(data.references[e]))
            elif e in cells:
                n = cells[e]["n_seeds"]
                flag = text.no_spread_note(n, 1) if text.zero_width(cells[e]) else ""
                if flag:
                    flat.append(f"{a} on {e}: {flag}")
                row.append(interval_cell(cells[e], raw=True, n=n, flag=flag))
            else:
                row.append("-")
        rows.append(row)
    return "\n".join([
        "<section id='per-env'><h2>Per env</h2>",
        f"<h3>Random and reference scores ({esc(conf)})</h3>",
        table(["env", f"random ({conf})", "reference", "reference from"], ref_rows),
        notes(details),
        f"<h3>Raw scores: IQM over seeds, {esc(conf)} (seeds)</h3>",
        table(["agent", *data.envs], rows),
        notes(flat),
        notes(["random: the mean return over the random agent's evaluation episodes with its "
               f"Student-t {conf}, the same number every normalised score is measured from."]
              if any(is_random(a, data.floor_labels) for a in data.shown) else []),
        "</section>",
    ])


def _sensitivity(summary: dict[str, Any], figures: dict[str, tuple[bytes, bytes]],
                 caps: dict[str, str]) -> str:
    """Per agent and swept key: the IQM of normalised scores at each value (empty when the
    folder sweeps no key)."""
    tables = summary.get("sensitivity") or []
    if not tables:
        return ""
    parts = ["<section id='sensitivity'><h2>Sensitivity to swept settings</h2>",
             "<p>Per swept key: the IQM of normalised scores over the runs at each value "
             "(pooled over envs and seeds), its stratified bootstrap interval, and the run "
             "count. Tuning trials vary every searched key at once: their tables are marginal "
             "(the other keys vary).</p>"]
    for t in tables:
        fixed = ",".join(f"{k}={v}" for k, v in t["fixed"].items())
        title = f"{t['agent']}{f' [{fixed}]' if fixed else ''}: {t['key']}" + (
            " (tuning trials: other keys vary)" if t["marginal"] else "")
        parts += [f"<h3>{esc(title)}</h3>", table(
            [t["key"], "IQM [95% CI]", "runs"],
            [[json.dumps(r["value"]), interval_cell(r), r["n_runs"]] for r in t["rows"]])]
    parts += [figure(figures, "sensitivity", "score against each swept key",
                     caps.get("sensitivity", "")), "</section>"]
    return "\n".join(parts)


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
    rows = [[Raw(f'<span class="nm">{esc(k)}</span>'), v] for k, v in rows]
    return ("<section id='protocol'><h2>Protocol</h2>" + table(["setting", "value"], rows,
                                                              ["l", "l"]) + "</section>")


def _problems(data: Any) -> str:
    head = "<section id='left-out'><h2>Runs left out</h2>"
    if not data.problems:
        return head + "<p>None: every run folder is complete and used.</p></section>"
    rows = [[p.status, p.run_id, p.agent, p.env, p.seed, p.reason] for p in data.problems]
    return head + table(["status", "run", "agent", "env", "seed", "reason"], rows,
                        ["l", "l", "l", "l", "r", "l"]) + "</section>"


def _provenance(data: Any) -> str:
    """One column per distinct provenance (usually one), one row per field."""
    groups: Counter[str] = Counter()
    for r in data.runs:
        groups[json.dumps(r.record.get("provenance") or {}, sort_keys=True)] += 1
    provs = [(json.loads(blob), n) for blob, n in groups.most_common()]
    header = ["field"] + [f"{n} run{'s' if n != 1 else ''}" for _, n in provs]
    rows = []
    for k in PROVENANCE_KEYS:
        values = [Raw(f"<code>{esc(p.get(k, ''))}</code>") if k.endswith(("version", "commit"))
                  else p.get(k, "") for p, _ in provs]
        rows.append([Raw(f'<span class="nm">{esc(k)}</span>'), *values])
    return ("<section id='provenance'><h2>Provenance of the runs</h2>"
            + table(header, rows, ["l"] * len(header)) + "</section>")


def splice_comparison(page: str, doc: dict[str, Any], folder: str,
                      labels: list[str], floor: list[str]) -> str:
    """``page`` with its verdict block and Comparison section made from ``doc``;
    ``labels``: the agents the page's figures were coloured for (its summary's
    ``shown_agents``, ``floor_agents``), so the swatches keep the figures' colours."""
    colours = agent_colours([*labels, doc["candidate"], *doc["baselines"]], floor)
    page = splice(page, VERDICT_START, VERDICT_END,
                  verdict_block(doc, folder, colours=colours))
    return splice(page, COMPARISON_START, COMPARISON_END,
                  comparison_section(doc, folder, colours=colours), after="</nav>")
