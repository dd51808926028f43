"""Writing a report folder: summary.json, scores.csv, curves.csv, figures, report.html and
compare.json, each atomically; the folder is built beside the old one and renamed in.
"""

from __future__ import annotations

import json
import os
import shutil
import tempfile
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from seedsweep.configs.checks import ConfigError
from seedsweep.runner.analysis.report import ORACLE_PROTOCOL, ReportData
from seedsweep.runner.execution import records
from seedsweep.runner.execution.records import (
    atomic_write_bytes,
    atomic_write_text,
    csv_text,
    fsync_dir,
    json_default,
)
from seedsweep.runner.present import figures as figs
from seedsweep.runner.present import html

COMPARE_FILE = "compare.json"


@dataclass
class ReportComparison:
    """What ``seedsweep report`` puts into the new report folder: compare.json's text, its
    parsed content for the page, and a note when it could not be recomputed."""

    text: str
    doc: dict[str, Any] | None
    note: str = ""


def summary_dict(data: ReportData) -> dict[str, Any]:
    opts = data.options
    return {
        "sweep": data.sweep.name,
        "agents": {
            a: {**{k: v.as_dict() for k, v in data.aggregates[a].items()},
                "n_runs": data.n_runs[a], "tuning": data.tuning.get(a)}
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
        "floor_agents": sorted(data.floor_labels),
        "excluded_runs": [vars(p) for p in data.problems],
        "sensitivity": [t.as_dict() for t in data.sensitivity],
        "timing": data.timing,
    }


def scores_csv(data: ReportData) -> str:
    rows = [(data.sweep.name, r.run_id, r.label, r.env_key, r.seed, *data.run_scores[r.run_id])
            for r in data.runs]
    return csv_text(("sweep", "run_id", "agent", "env", "seed", "score", "normalised_score"),
                    rows)


def curves_csv(data: ReportData) -> str:
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
    ``comparison`` (:class:`ReportComparison`) adds compare.json and the
    page's Comparison section."""
    sweep_dir = data.sweep.path
    target = sweep_dir / "report"
    tmp = Path(tempfile.mkdtemp(prefix=".report-tmp-", dir=sweep_dir))
    tmp.chmod(0o777 & ~records._UMASK)  # mkdtemp makes 0700
    try:
        figures: dict[str, tuple[bytes, bytes]] = {}
        if with_figures:
            t0 = time.perf_counter()
            figures = figs.all_figures(data)
            data.timing["figures_s"] = round(time.perf_counter() - t0, 3)
            for name, (png, svg) in figures.items():
                atomic_write_bytes(tmp / "figures" / f"{name}.png", png)
                atomic_write_bytes(tmp / "figures" / f"{name}.svg", svg)
        summary = summary_dict(data)
        if figures:
            summary["figures"] = {name: f"figures/{name}.png (and .svg): {caption}"
                                  for name, caption in figs.captions(data).items()}
        atomic_write_text(tmp / "summary.json",
                          json.dumps(summary, indent=2, default=json_default) + "\n")
        atomic_write_text(tmp / "scores.csv", scores_csv(data))
        atomic_write_text(tmp / "curves.csv", curves_csv(data))
        if comparison is not None:
            atomic_write_text(tmp / "compare.json", comparison.text)
        atomic_write_text(tmp / "report.html",
                          html.render(data, summary, figures, comparison))
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


def dumps(doc: dict[str, Any]) -> str:
    return json.dumps(doc, indent=2, default=json_default) + "\n"



def write_comparison(doc: dict[str, Any], sweep_dir: Path) -> Path:
    """compare.json into the report folder (made if missing), and the Comparison section of
    report.html replaced when the page exists. Each file is replaced atomically."""
    check_output_folder(sweep_dir)
    folder = Path(sweep_dir) / "report"
    target = folder / COMPARE_FILE
    atomic_write_text(target, dumps(doc))
    page = folder / "report.html"
    if page.is_file():
        atomic_write_text(page, html.splice_comparison(page.read_text(), doc, str(sweep_dir),
                                                       *_shown_agents(folder)))
    return target


def _shown_agents(folder: Path) -> tuple[list[str], list[str]]:
    """The agents the existing page was coloured for and its random floor (its
    summary.json), or none."""
    try:
        summary = json.loads((folder / "summary.json").read_text())
        shown, floor = summary.get("shown_agents"), summary.get("floor_agents")
    except (OSError, ValueError, AttributeError):
        return [], []
    return ([str(a) for a in shown] if isinstance(shown, list) else [],
            [str(a) for a in floor] if isinstance(floor, list) else [])



def check_output_folder(sweep_dir: Path) -> None:
    folder = Path(sweep_dir) / "report"
    if folder.exists() and not folder.is_dir():
        raise ConfigError("sweep", f"{folder} exists and is not a folder")

